"""reactions stage (being built)."""
