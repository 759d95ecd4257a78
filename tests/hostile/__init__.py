"""Hostile and heavy inputs for the hardening tests (a corpus kept as Python tables)."""
