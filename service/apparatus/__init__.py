"""apparatus feature."""
