"""What each command does, callable from Python: build findings, never print or exit."""
