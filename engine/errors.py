"""Errors that the engine raises for input a person can fix.

Every message names what was wrong and what to do, so that the command line and the pages can
show it as it is, without a traceback.
"""

from __future__ import annotations


class CeilingLabError(Exception):
    """Base class of the engine's own errors: the message is meant for the user."""


class InputError(CeilingLabError, ValueError):
    """A value, a file or an option that the engine cannot use as given."""
