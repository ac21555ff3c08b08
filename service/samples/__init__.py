"""samples feature."""
