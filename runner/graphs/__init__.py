"""graphs layer."""
