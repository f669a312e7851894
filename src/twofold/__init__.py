"""Twofold: logistic models of yes/no clinical outcomes, explained in plain words."""

__version__ = "0.1.0"
