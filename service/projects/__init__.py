"""projects feature."""
