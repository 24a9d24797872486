"""Deterministic generator of the invented sample scenario."""
