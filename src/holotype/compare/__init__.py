"""Compare: two captures in, a list of Findings out. Never prints, never exits."""
