"""verification layer."""
