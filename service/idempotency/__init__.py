"""Idempotent writes: a retried request with the same key gets the first answer again."""
