"""spectra stage (being built)."""
