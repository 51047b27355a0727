"""The project's own errors.

Every error a person can cause (a bad table, a bad role, a damaged project file)
is raised as a subclass of :class:`RegbenchError` with a message that names the
file, column, row or field and says what to do.  The CLI prints the message on
one line and exits with status 2; the GUI shows it in a dialog.
"""


class RegbenchError(Exception):
    """Base class for errors a person can act on."""


class DataError(RegbenchError):
    """The table or the column roles cannot be used as given."""


class ModelError(RegbenchError):
    """The engine cannot fit the requested model on this design."""


class ProjectError(RegbenchError):
    """A project file is damaged, foreign, too new or cannot be written."""


class Cancelled(RegbenchError):
    """Long work was cancelled by the person who started it."""
