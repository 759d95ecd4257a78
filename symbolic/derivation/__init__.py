"""derivation layer."""
