"""present layer."""
