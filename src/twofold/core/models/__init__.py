"""Designing and fitting models: encodings, fits, tests, the ladder of models tried."""
