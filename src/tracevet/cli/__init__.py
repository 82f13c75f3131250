"""Command-line interface: thin wrappers over the core layers."""
