"""HTML pages and htmx fragments."""
