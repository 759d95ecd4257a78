"""runtime layer."""
