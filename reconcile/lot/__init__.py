"""Characterising a transistor lot from a jig or from sweeps."""
