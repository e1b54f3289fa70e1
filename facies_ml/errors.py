"""One error type for bad input: the message names the file, well, curve, depth or row."""

from __future__ import annotations


class InputError(Exception):
    """Bad user input. ``str(err)`` is one line naming where the problem is.

    The CLI prints it as ``error: <message>`` and exits with status 2, never a traceback.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        well: str | None = None,
        curve: str | None = None,
        depth: float | None = None,
        unit: str | None = None,
        row: int | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.well = well
        self.curve = curve
        self.depth = depth
        self.unit = unit
        self.row = row
        super().__init__(str(self))

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(f"file {self.file}")
        if self.well:
            where.append(f"well {self.well!r}")
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.curve:
            where.append(f"curve {self.curve!r}")
        if self.depth is not None:
            where.append(f"depth {self.depth:g}{' ' + self.unit if self.unit else ''}")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class ModelStoreError(InputError):
    """A model bundle is missing, corrupt, untrusted or incompatible."""
