"""Analyses built on the engines: extremal games and move statistics."""
