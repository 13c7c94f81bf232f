"""The exception family of jointwise: one base class, one subclass per kind of failure."""
from __future__ import annotations

__all__ = ["JointwiseError", "SpecError", "AssemblyError", "LimitError"]


class JointwiseError(ValueError):
    """Base class of every error jointwise raises on purpose."""


class SpecError(JointwiseError):
    """A mechanism file or description is malformed.

    The message starts with the file name and the key path, e.g.
    ``vise.toml: joints.screw.axis: axis has zero length``.
    """

    def __init__(self, message, *, source=None, key=None):
        self.source = source
        self.key = key
        parts = [p for p in (source, key) if p]
        super().__init__(": ".join(parts + [message]))


class AssemblyError(JointwiseError):
    """The mechanism cannot be assembled with the held values.

    Attributes
    ----------
    loop : str or None
        Name of the loop that would not close (the joint that closes it), if any.
    error : float or None
        Closest closure error reached (length unit or radian, the larger).
    joint : str or None
        The joint or coordinate most likely responsible (out of reach, or a limit).
    """

    def __init__(self, message, *, loop=None, error=None, joint=None):
        self.loop = loop
        self.error = error
        self.joint = joint
        super().__init__(message)


class LimitError(AssemblyError):
    """A held or solved coordinate lies outside its joint's limits."""
