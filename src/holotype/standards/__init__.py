"""One module per open standard holotype writes: requirements lines (PEP 508/440) and pylock.toml (PEP 751)."""
