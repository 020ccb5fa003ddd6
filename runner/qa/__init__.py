"""qa layer."""
