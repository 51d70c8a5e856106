"""`berth`, the command line: quote, sweep and plan offline, check catalogs, manage keys, serve."""

from service.cli.commands import app, main

__all__ = ["app", "main"]
