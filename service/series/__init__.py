"""Compaction series: specimens of one material compacted at different water contents and
densities, classed against the specification limit (service/series/service.py)."""
