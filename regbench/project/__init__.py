"""The ``.regbench`` project file: save, load, validate, migrate, inspect (format in FORMAT.md)."""

from regbench.project.store import inspect_project, load_project, save_project
from regbench.sentences import inspect_text  # its words live with the other texts for people

__all__ = ["save_project", "load_project", "inspect_project", "inspect_text"]
