"""Scenario files: the key schema engine shared by every command."""
