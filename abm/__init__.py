"""Undertow: simulate a freight crossing, keep truth apart from what is observed, estimate what is not seen."""

__version__ = "0.1.0"
