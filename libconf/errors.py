"""The one exception type that bad input raises."""

from __future__ import annotations


class InputError(ValueError):
    """A record libconf cannot analyse, with a reason a chemist can act on.

    ``stage`` says where it failed: ``read`` (the record could not be taken from
    the file), ``parse`` (RDKit could not build a molecule) or ``analyse`` (the
    molecule was built but is outside what libconf handles).
    """

    def __init__(self, reason: str, stage: str = "parse") -> None:
        super().__init__(reason)
        self.reason = reason
        self.stage = stage
