"""Seepline: system of record for laboratory hydraulic conductivity testing."""

__version__ = "0.1.0"
