"""Trust checks on libraries and results (conditioning, range, residuals, shift)."""
