"""The errors querygap raises on purpose.

Every error a user can cause is a :class:`QuerygapError`; the command line catches that base
class in one place, prints one line and exits with status 1. Anything else is a bug and keeps
its traceback.
"""

from __future__ import annotations


class QuerygapError(Exception):
    """Base class: a problem the user can fix, with a message that says how."""


class InputError(QuerygapError):
    """An input file cannot be read as asked (names the file, the line and the field)."""


class SchemaError(QuerygapError):
    """The workspace file was made by another version of querygap, or is not a workspace."""


class ConfigError(QuerygapError):
    """A setting is out of range, or two settings contradict each other."""


class OutputError(QuerygapError):
    """An output folder or file cannot be written (names the path and the reason)."""


class WorkspaceBusyError(QuerygapError):
    """Another process holds the workspace file."""


class StageOrderError(QuerygapError):
    """A stage was asked for before the stage it reads from has run."""
