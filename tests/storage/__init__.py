"""Storage tests: the repository and migrations on a real SQLite file."""
