"""What is derived from a solved grid: summaries, profiles, outlines."""
