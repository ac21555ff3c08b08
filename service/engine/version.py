"""Version of the reduction engine, stored with every result it makes."""

ENGINE_VERSION = "1.1.0"
