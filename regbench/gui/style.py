"""The window's look in one place: a calm light palette and one colour per model."""

from __future__ import annotations

from regbench.palette import CORR_STOPS, MODEL_COLOURS, PALETTE, SERIES, model_colour, series_colour  # noqa: F401

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
QFrame#question {{ background: {PALETTE['panel']}; border-bottom: 1px solid {PALETTE['grid']}; }}
QFrame#question QLabel#questionWords {{ font-size: 11pt; }}
QFrame#question QComboBox {{ font-size: 11pt; font-weight: 600; color: {PALETTE['accent']}; }}
QPushButton#primary[pending="false"] {{ background: {PALETTE['base']}; color: {PALETTE['text']};
  border-color: {PALETTE['grid']}; }}
QStatusBar {{ background: {PALETTE['panel']}; border-top: 1px solid {PALETTE['grid']}; }}
QTabBar::tab {{ background: {PALETTE['alt_base']}; padding: 4px 12px; border: 1px solid {PALETTE['grid']}; }}
QTabBar::tab:selected {{ background: {PALETTE['base']}; }}
"""


def configure_pyqtgraph() -> None:
    """Light plots with antialiasing (pyqtgraph defaults to a black background)."""
    import pyqtgraph as pg

    pg.setConfigOptions(background=PALETTE["base"], foreground=PALETTE["text"], antialias=True)


def plain_axes(*widgets) -> None:
    """Turn off pyqtgraph's SI-prefix axis scaling ("(x0.001)") on every axis of these plot widgets.

    Numbers on an axis are in the units the tables show; a label names the unit plainly.
    """
    import pyqtgraph as pg

    for w in widgets:
        scene = w.scene() if hasattr(w, "scene") else None
        for item in (scene.items() if scene is not None else ()):
            if isinstance(item, pg.AxisItem):
                item.enableAutoSIPrefix(False)


def keep_legend_above(plot, bottom: float, top: float, pad_px: float = 10.0) -> None:
    """Show ``bottom``–``top`` of a plot's y axis plus a band above ``top`` as tall as its legend.

    The band is measured in the plot's own pixels (legend height, its offset and ``pad_px``) and
    measured again on every resize, so the legend never covers a bar or a curve at any window size.
    """
    plot._legend_span = (float(bottom), float(top), float(pad_px))
    vb = plot.getViewBox()
    if not getattr(plot, "_legend_hooked", False):
        vb.sigResized.connect(lambda *_: keep_legend_above(plot, *plot._legend_span))
        plot._legend_hooked = True
    legend = plot.getPlotItem().legend
    height = float(vb.height())
    if legend is not None and legend.items:
        legend.updateSize()
        offset = legend.opts.get("offset") or (0, 0)
        need = float(legend.boundingRect().height()) + abs(float(offset[1])) + pad_px
    else:
        need = pad_px
    f = min(0.6, need / height) if height > 0 else 0.3
    # (new_top − top) must be the share f of the whole span (new_top − bottom).
    plot.setYRange(bottom, (top - f * bottom) / (1.0 - f), padding=0)
