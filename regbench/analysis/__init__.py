"""Comparisons built on fitted models: agreement, structure, stress, stability (no Qt)."""
