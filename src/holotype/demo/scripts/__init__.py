"""The demo project's analysis scripts (copied into the demo folder as analysis/*.py)."""
