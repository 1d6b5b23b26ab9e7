"""Problems that stop a whole run (as opposed to a bad record, which becomes an error row)."""

from __future__ import annotations


class UsageError(Exception):
    """The command asks for something libconf cannot do as asked (exit status 2)."""


class FatalError(Exception):
    """The run cannot go on: an unreadable input file, a full disk (exit status 1)."""
