"""protocol layer."""
