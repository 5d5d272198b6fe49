"""Results to bytes: HTML reports, PNG figures, JSON and CSV text. Reads no files and fits no models."""
