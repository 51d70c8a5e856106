"""Pydantic models at the edge: what clients send and receive. Converted once into the domain."""
