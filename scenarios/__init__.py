"""What we run: short scenario scripts that a user copies and edits."""
