"""session layer."""
