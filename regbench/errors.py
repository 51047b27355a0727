"""The project's own errors.

Every error a person can cause (a bad table, a bad role, a damaged project file)
is raised as a subclass of :class:`RegbenchError` with a message that names the
file, column, row or field and says what to do.  The CLI prints the message on
one line and exits with status 2; the GUI shows it in a dialog.
"""


import re

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def one_line(text) -> str:
    """``text`` on one line: line breaks and other control characters (from a file's cell or
    column name, or a library's message) shown as escapes, runs of spaces kept short."""
    text = str(text)
    if _CONTROL.search(text):
        text = _CONTROL.sub(lambda m: {"\n": "\\n", "\r": "\\r", "\t": " "}.get(m.group(), f"\\x{ord(m.group()):02x}"
                                       if ord(m.group()) < 256 else f"\\u{ord(m.group()):04x}"), text)
    return text


class RegbenchError(Exception):
    """Base class for errors a person can act on.  The message is kept to one line."""

    def __init__(self, *args):
        if args:
            args = (one_line(args[0]),) + args[1:]
        super().__init__(*args)


class DataError(RegbenchError):
    """The table or the column roles cannot be used as given."""


class ModelError(RegbenchError):
    """The engine cannot fit the requested model on this design."""


class ProjectError(RegbenchError):
    """A project file is damaged, foreign, too new or cannot be written."""


class Cancelled(RegbenchError):
    """Long work was cancelled by the person who started it."""
