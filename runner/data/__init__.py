"""data layer."""
