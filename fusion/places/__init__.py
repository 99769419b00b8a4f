"""Localization on a graph of places: the frame, its motion, its sensors and its filters."""
