"""JSON API under /api/v1."""
