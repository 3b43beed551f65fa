"""Learned models and how far they are from an environment's true transition table."""
