"""Synthetic slides and the demo cohort (an invented scenario; no real patients or sites)."""
