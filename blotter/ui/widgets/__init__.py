"""One widget per file."""
