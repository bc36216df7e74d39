"""privacy."""
