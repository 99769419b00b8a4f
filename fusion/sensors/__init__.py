"""Sensor models: each turns one reading into evidence usable by both back ends (see ``base``)."""
