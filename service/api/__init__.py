"""The HTTP layer: app factory, routers, schemas, dependencies and error mapping."""
