"""Fitting sensor models to labelled logs (the optional ``calibrate`` extra does the inference)."""
