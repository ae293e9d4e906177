"""holotype: keep the reference specimen of a data analysis and check later runs against it."""

__version__ = "0.1.0"
