"""Migration revisions, oldest first."""
