"""One module per command: its scenario tables, checks and runner."""
