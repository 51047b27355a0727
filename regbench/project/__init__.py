"""The ``.regbench`` project file: save, load, validate, migrate, inspect (format in FORMAT.md)."""

from regbench.project.store import inspect_project, inspect_text, load_project, save_project

__all__ = ["save_project", "load_project", "inspect_project", "inspect_text"]
