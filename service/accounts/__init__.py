"""accounts feature."""
