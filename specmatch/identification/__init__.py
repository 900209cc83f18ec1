"""identification stage (being built)."""
