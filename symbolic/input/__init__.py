"""input layer."""
