"""Small helpers every layer uses: atomic file writes.  Imports nothing of stripscan."""
