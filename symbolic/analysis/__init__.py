"""analysis layer."""
