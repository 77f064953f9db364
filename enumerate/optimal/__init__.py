"""Optimal play: outcome classes of every state, the winner, and winning strategies."""
