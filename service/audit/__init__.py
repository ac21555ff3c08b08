"""audit feature."""
