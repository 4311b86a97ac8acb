"""The command line: one module per command, each calling one library function."""
