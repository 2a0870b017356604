"""Exceptions raised by arrayplan.

Every problem caused by the user's input (a rig file, an argument, an
impulse-response set, a device) is an :class:`InputError`.  Its message is a
single line that names the file and the field and says how to fix it; the
command-line interface prints that line and exits with status 2.
"""

from __future__ import annotations

__all__ = ["ArrayplanError", "InputError", "DeviceError"]


class ArrayplanError(Exception):
    """Base class of every exception arrayplan raises on purpose."""


class InputError(ArrayplanError, ValueError):
    """Bad user input: a malformed file, a wrong value, a missing field.

    Parameters
    ----------
    problem : str
        What is wrong, quoting the bad value where that helps.
    source : str, optional
        The file (or the parameter, which a command shows as its own option) the bad value came from.
    field : str, optional
        Where inside the source, for example ``"speakers[2].position"``.
    fix : str, optional
        How to put it right.
    """

    def __init__(self, problem: str, *, source: str | None = None,
                 field: str | None = None, fix: str | None = None) -> None:
        self.problem = problem
        self.source = source
        self.field = field
        self.fix = fix
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The message as one line: ``source: field: problem (fix: ...)``.

        Returns
        -------
        str
            Source and field only where set.
        """
        parts = [p for p in (self.source, self.field) if p]
        text = ": ".join(parts + [self.problem])
        if self.fix:
            text += f" (fix: {self.fix})"
        return " ".join(text.split())


class DeviceError(InputError):
    """An audio device is missing, ambiguous or cannot do what was asked."""
