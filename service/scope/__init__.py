"""The laboratory's accredited scope: standards and editions, confirmed limits, defaults."""
