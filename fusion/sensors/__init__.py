"""Sensor models: each turns one reading into evidence usable by every back end (see ``base``)."""
