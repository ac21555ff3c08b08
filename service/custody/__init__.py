"""custody feature."""
