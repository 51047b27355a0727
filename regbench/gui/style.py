"""The window's look in one place: a calm light palette and one colour per model."""

from __future__ import annotations

#: Background, panels, text and accents of the light theme.
PALETTE = {
    "window": "#f4f3ef",      # warm paper
    "panel": "#fbfaf7",
    "base": "#ffffff",
    "alt_base": "#f0efe9",
    "text": "#26303a",
    "muted": "#66707a",
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
    """Colour of a model key; further elastic-net ratios get their own shades."""
    if name in MODEL_COLOURS:
        return MODEL_COLOURS[name]
    return _EXTRA[sum(map(ord, name)) % len(_EXTRA)]


#: Column colours for coefficient paths (a long qualitative cycle of our own).
SERIES = (
    "#2f6f73", "#e07a1f", "#8a4fb0", "#c2185b", "#3d7ebf", "#7a8b2e", "#9c6b3f", "#4a4e69",
    "#d4a017", "#1b998b", "#b5523b", "#5e60ce", "#6a994e", "#bc4749", "#577590", "#f28482",
)


def series_colour(i: int) -> str:
    return SERIES[i % len(SERIES)]


#: Diverging map for correlations: teal (−1) through paper (0) to brick (+1).
CORR_STOPS = ((0.0, (47, 111, 115)), (0.5, (247, 246, 242)), (1.0, (164, 69, 44)))

STYLESHEET = f"""
QMainWindow, QWidget {{ background: {PALETTE['window']}; color: {PALETTE['text']}; font-size: 10pt; }}
QTableView {{ background: {PALETTE['base']}; alternate-background-color: {PALETTE['alt_base']};
  gridline-color: {PALETTE['grid']}; selection-background-color: {PALETTE['accent_soft']};
  selection-color: {PALETTE['text']}; }}
QHeaderView::section {{ background: {PALETTE['alt_base']}; color: {PALETTE['text']}; padding: 3px 6px;
  border: 0; border-right: 1px solid {PALETTE['grid']}; border-bottom: 1px solid {PALETTE['grid']}; }}
QLabel#sentences {{ background: {PALETTE['sentence_bg']}; border-left: 4px solid {PALETTE['accent']};
  padding: 8px 10px; font-size: 11pt; }}
QLabel#title {{ font-size: 15pt; font-weight: 600; color: {PALETTE['accent']}; }}
QListWidget#nav {{ background: {PALETTE['panel']}; border: 0; border-right: 1px solid {PALETTE['grid']};
  font-size: 11pt; }}
QListWidget#nav::item {{ padding: 8px 10px; }}
QListWidget#nav::item:selected {{ background: {PALETTE['accent_soft']}; color: {PALETTE['text']};
  border-left: 4px solid {PALETTE['accent']}; }}
QPushButton {{ background: {PALETTE['base']}; border: 1px solid {PALETTE['grid']}; border-radius: 4px;
  padding: 4px 12px; }}
QPushButton:hover {{ border-color: {PALETTE['accent']}; }}
QPushButton#primary {{ background: {PALETTE['accent']}; color: white; border-color: {PALETTE['accent']}; }}
QGroupBox {{ border: 1px solid {PALETTE['grid']}; border-radius: 4px; margin-top: 14px; padding-top: 6px; }}
QGroupBox::title {{ subcontrol-origin: margin; left: 8px; padding: 0 4px; color: {PALETTE['muted']}; }}
QComboBox, QSpinBox, QDoubleSpinBox, QLineEdit {{ background: {PALETTE['base']};
  border: 1px solid {PALETTE['grid']}; border-radius: 3px; padding: 2px 4px; }}
QStatusBar {{ background: {PALETTE['panel']}; border-top: 1px solid {PALETTE['grid']}; }}
QTabBar::tab {{ background: {PALETTE['alt_base']}; padding: 4px 12px; border: 1px solid {PALETTE['grid']}; }}
QTabBar::tab:selected {{ background: {PALETTE['base']}; }}
"""


def configure_pyqtgraph() -> None:
    """Light plots with antialiasing (pyqtgraph defaults to a black background)."""
    import pyqtgraph as pg

    pg.setConfigOptions(background=PALETTE["base"], foreground=PALETTE["text"], antialias=True)
