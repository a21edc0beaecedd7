"""The package's exception types and the CLI exit codes they map to.

Every error a user can cause names the file, the item and what is wrong, so that the CLI can print it
as one readable line.
"""

from __future__ import annotations

EXIT_CLEAR = 0
"""Every existing, within-limits branch (and motion) is clear."""
EXIT_FINDING = 1
"""At least one finding: below margin, intrusion, outside limits, unreachable."""
EXIT_BAD_INPUT = 2
"""The input could not be read or is invalid."""
EXIT_INTERNAL = 3
"""An error inside envelope itself (a bug): please report it."""


class EnvelopeError(Exception):
    """Base class of every error raised on purpose by envelope."""

    exit_code = EXIT_INTERNAL


class InputError(EnvelopeError, ValueError):
    """Bad input: a file, an item in it, or an argument of a public function.

    Parameters
    ----------
    problem : str
        What is wrong, with the expected and the actual value where that helps.
    file : str or path, optional
        The file the item came from.
    item : str, optional
        The item: ``target "pick-3"``, ``zone "north fence"``, ``row 12``.
    """

    exit_code = EXIT_BAD_INPUT

    def __init__(self, problem: str, *, file=None, item: str | None = None):
        self.problem = problem
        self.file = None if file is None else str(file)
        self.item = item
        super().__init__(self._line())

    def _line(self) -> str:
        parts = [p for p in (self.file, self.item) if p]
        return ": ".join(parts + [self.problem])

    def located(self, *, file=None, item: str | None = None) -> "InputError":
        """A copy of this error with the file and/or item filled in where they were missing."""
        cls = type(self)
        new = cls.__new__(cls)
        InputError.__init__(
            new,
            self.problem,
            file=self.file if self.file is not None else file,
            item=self.item if self.item is not None else item,
        )
        return new


class PoseError(InputError):
    """A pose that is not a valid rigid transform (shape, finiteness, bottom row, rotation)."""


class CellFileError(InputError):
    """A cell file, or a file it refers to, that cannot be read or is invalid."""


class ProgramError(InputError):
    """A program (list of moves) that refers to unknown targets or branches, or is malformed."""
