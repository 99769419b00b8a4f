"""Belief representations and the operations on them (no sensor or map knowledge here)."""
