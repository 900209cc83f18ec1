"""Reports stage: readable text, journal-style peak text, HTML, JSON and CSV exports."""
