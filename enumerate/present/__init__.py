"""Presenting results: figures of a run over a range of n and the HTML report."""
