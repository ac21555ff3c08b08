"""signoffs feature."""
