"""Colours shared by the window and the report, so a model or a column has one colour everywhere."""

from __future__ import annotations

#: Background, panels, text and accents of the light theme.
PALETTE = {
    "window": "#f4f3ef",      # warm paper
    "panel": "#fbfaf7",
    "base": "#ffffff",
    "alt_base": "#f0efe9",
    "text": "#26303a",
    "muted": "#66707a",
    "faint": "#c9c5ba",       # dimmed curves and their labels
    "accent": "#2f6f73",      # deep teal for selection and the chosen α
    "accent_soft": "#d6e8e6",
    "grid": "#d9d6cc",
    "warn": "#a4452c",
    "sentence_bg": "#eaf1ef",
}

#: One distinct colour per model family; every plot and table uses these.
MODEL_COLOURS = {
    "ols": "#4a4e69",          # slate
    "ridge": "#2a9d8f",        # sea green
    "lasso": "#e07a1f",        # amber
    "elastic_net": "#8a4fb0",  # plum
}
_EXTRA = ("#c2185b", "#3d7ebf", "#7a8b2e", "#9c6b3f")


def model_colour(name: str) -> str:
    """Colour of a model key; further elastic-net ratios and extra fits get their own shades."""
    if name in MODEL_COLOURS:
        return MODEL_COLOURS[name]
    return _EXTRA[sum(map(ord, name)) % len(_EXTRA)]


#: Column colours for coefficient paths (a long qualitative cycle of our own).
SERIES = (
    "#2f6f73", "#e07a1f", "#8a4fb0", "#c2185b", "#3d7ebf", "#7a8b2e", "#9c6b3f", "#4a4e69",
    "#d4a017", "#1b998b", "#b5523b", "#5e60ce", "#6a994e", "#bc4749", "#577590", "#f28482",
)


def series_colour(i: int) -> str:
    """Colour of the i-th column (or the i-th line of a chart that is not about models)."""
    return SERIES[i % len(SERIES)]


#: Diverging map for correlations: teal (−1) through paper (0) to brick (+1).
CORR_STOPS = ((0.0, (47, 111, 115)), (0.5, (247, 246, 242)), (1.0, (164, 69, 44)))
