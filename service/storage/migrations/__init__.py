"""Alembic migrations of the berth schema."""
