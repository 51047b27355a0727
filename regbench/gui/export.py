"""Writing a plot to PNG or SVG.

SVG goes through Qt's own SVG generator rendering the plot widget, not through
pyqtgraph's SVG exporter, which fails on Qt 6.11 and later.
"""

from __future__ import annotations

import os

from PySide6 import QtCore, QtGui, QtSvg, QtWidgets

from regbench.errors import RegbenchError
from regbench.gui.tables import cell_text, header_text


def export_png(plot_widget, path: str, width: int = 1200) -> str:
    """PNG of a pyqtgraph PlotWidget (or a widget that paints itself: ``render_to``) at ``width`` pixels."""
    if hasattr(plot_widget, "render_to"):
        return _painted_png(plot_widget, path, width)
    import pyqtgraph.exporters as pgx

    exporter = pgx.ImageExporter(plot_widget.getPlotItem() if hasattr(plot_widget, "getPlotItem") else plot_widget.scene())
    exporter.parameters()["width"] = int(width)
    tmp = _beside(path)
    try:
        exporter.export(tmp)
        os.replace(tmp, path)
    except Exception as exc:
        _drop(tmp)
        raise RegbenchError(f"{os.path.basename(path)}: could not write the PNG ({exc}); choose another folder") from None
    return path


def export_svg(widget, path: str, title: str = "regbench plot") -> str:
    """SVG of a widget (a pyqtgraph PlotWidget or any QWidget) through QSvgGenerator."""
    size = widget.export_size() if hasattr(widget, "export_size") else widget.size()
    if size.width() < 50 or size.height() < 50:
        size = QtCore.QSize(900, 600)
        widget.resize(size)
    tmp = _beside(path)
    gen = QtSvg.QSvgGenerator()
    gen.setFileName(tmp)
    gen.setSize(size)
    gen.setViewBox(QtCore.QRect(0, 0, size.width(), size.height()))
    gen.setTitle(title)
    gen.setDescription("written by regbench")
    painter = QtGui.QPainter()
    if not painter.begin(gen):
        _drop(tmp)
        raise RegbenchError(f"{os.path.basename(path)}: could not start the SVG file; check the folder is writable")
    try:
        painter.setRenderHint(QtGui.QPainter.Antialiasing)
        if hasattr(widget, "render_to"):
            widget.render_to(painter, size.width(), size.height())
        elif isinstance(widget, QtWidgets.QGraphicsView):
            # Render the scene itself so items stay vectors.
            source = widget.mapToScene(widget.viewport().rect()).boundingRect()
            widget.scene().render(painter, QtCore.QRectF(0, 0, size.width(), size.height()), source)
        else:
            widget.render(painter)
    finally:
        painter.end()
    if not os.path.exists(tmp) or os.path.getsize(tmp) == 0:
        _drop(tmp)
        raise RegbenchError(f"{os.path.basename(path)}: the SVG came out empty; try PNG instead")
    os.replace(tmp, path)
    return path


def _painted_png(widget, path: str, width: int) -> str:
    """PNG of a self-painting figure laid out at its on-screen size and drawn at ``width`` pixels."""
    size = widget.export_size() if hasattr(widget, "export_size") else widget.size()
    w, h = max(size.width(), 600), max(size.height(), 400)
    scale = max(width / w, 1.0)
    image = QtGui.QImage(int(w * scale), int(h * scale), QtGui.QImage.Format_ARGB32)
    image.fill(QtGui.QColor("#ffffff"))
    painter = QtGui.QPainter(image)
    try:
        painter.scale(scale, scale)
        widget.render_to(painter, w, h)
    finally:
        painter.end()
    tmp = _beside(path)
    if not image.save(tmp, "PNG"):
        _drop(tmp)
        raise RegbenchError(f"{os.path.basename(path)}: could not write the PNG; choose another folder")
    os.replace(tmp, path)
    return path


def export_plot(widget, path: str) -> str:
    ext = os.path.splitext(path)[1].lower()
    if ext == ".svg":
        return export_svg(widget, path)
    if ext in (".png", ""):
        return export_png(widget, path if ext else path + ".png")
    raise RegbenchError(f"{os.path.basename(path)}: plots are written as .png or .svg; choose one of those")


def export_csv(model, path: str) -> str:
    """A table model as CSV (UTF-8, header line first) with every number at full precision."""
    import csv

    from PySide6.QtCore import Qt

    tmp = _beside(path)
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            out = csv.writer(fh)
            cols = range(model.columnCount())
            labels = [model.headerData(r, Qt.Vertical) for r in range(model.rowCount())]
            named_rows = any(lab is not None and lab != str(r + 1) for r, lab in enumerate(labels))
            head = [header_text(model, c) for c in cols]
            out.writerow(([""] if named_rows else []) + head)
            for r in range(model.rowCount()):
                row = [cell_text(model, r, c) for c in cols]
                out.writerow(([labels[r]] if named_rows else []) + row)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        _drop(tmp)
        raise RegbenchError(f"{os.path.basename(path)}: could not write the CSV ({exc.strerror or exc}); "
                            "choose another folder") from None
    return path


def _beside(path: str) -> str:
    d, b = os.path.split(os.path.abspath(path))
    ext = os.path.splitext(b)[1]
    return os.path.join(d, f".{b}.partial{ext}")


def _drop(p: str) -> None:
    try:
        os.remove(p)
    except OSError:
        pass
