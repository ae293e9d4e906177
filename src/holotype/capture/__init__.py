"""Capture: read the world (interpreter, packages, files, outputs) and return plain data."""
