"""Speed benchmarks: commands that print ratios (never run as tests)."""
