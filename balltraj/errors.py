"""The one error path of balltraj.

Library code raises :class:`BallTrajError` (or a subclass) for anything a user can fix: a bad file,
a bad option value, a flight that never reaches the asked-for plane. The CLI turns these into one
line ``error: <file>: <problem>; <what to do>`` and exit status 2. Anything else is a bug (exit 1).
"""

from __future__ import annotations


class BallTrajError(Exception):
    """A problem with the user's input or request, with an optional file and a hint."""

    def __init__(self, problem: str, *, path: str | None = None, hint: str | None = None,
                 about: str | None = None):
        self.problem = problem
        self.path = path
        self.hint = hint
        #: which input the problem is about, in domain words (``"target_x"``, ``"start_near"``...);
        #: the CLI maps it to its option name, so low layers never name command-line flags
        self.about = about
        super().__init__(self.one_line())

    def one_line(self) -> str:
        text = " ".join(str(self.problem).split())
        if self.path is not None:
            text = f"{self.path}: {text}"
        if self.hint:
            text = f"{text}; {' '.join(self.hint.split())}"
        return text

    def with_path(self, path: str) -> "BallTrajError":
        """The same error, attributed to ``path`` (keeps an existing path)."""
        if self.path is None:
            self.path = path
            self.args = (self.one_line(),)
        return self


class InputError(BallTrajError):
    """A file or option value that cannot be used as given."""


class PhysicsError(BallTrajError):
    """A physically impossible request (e.g. a target plane the flight never reaches)."""


class FitError(BallTrajError):
    """A fit that cannot be done with the data given (too few points, unobservable quantity)."""
