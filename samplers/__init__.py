"""Reverse-time samplers written against the Space protocol only."""
