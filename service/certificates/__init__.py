"""certificates feature."""
