"""lab tests feature."""
