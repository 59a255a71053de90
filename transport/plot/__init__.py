"""plot."""
