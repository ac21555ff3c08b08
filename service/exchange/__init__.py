"""Data exchange: exports of a project's results, imports of readings and sample schedules."""
