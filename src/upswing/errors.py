"""The exceptions upswing raises on bad input or impossible requests.

One message shape everywhere: what was wrong, where (file and key), what is allowed, what was found, e.g.
``rig.toml: link1.com must be in (0, length] = (0, 0.25] m; got 0.31``. The CLI turns every :class:`UpswingError`
into that one line on stderr and a non-zero exit, never a traceback.
"""

from __future__ import annotations


class UpswingError(Exception):
    """Base class of every error upswing raises deliberately for a user to read."""


class RigFileError(UpswingError, ValueError):
    """A rig file is unreadable, incomplete or holds a value outside its accepted range.

    Parameters
    ----------
    source : str
        The file name (or ``"<table>"`` when a rig is built from a dict in code).
    key : str
        Dotted key path inside the file, e.g. ``"link1.com"``; empty for file-level problems.
    problem : str
        What is wrong and what is allowed, in words.
    """

    def __init__(self, source: str, key: str, problem: str) -> None:
        self.source = source
        self.key = key
        self.problem = problem
        super().__init__(f"{source}: {key} {problem}" if key else f"{source}: {problem}")


class RequestError(UpswingError, ValueError):
    """A request that cannot be carried out as asked (zero rollouts, unknown equilibrium, ...)."""


class SynthesisError(UpswingError, RuntimeError):
    """A design step failed numerically (Riccati solver, optimizer) and says what to try instead."""
