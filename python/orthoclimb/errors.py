"""Exceptions raised by orthoclimb.

Every error the package raises on bad input is a subclass of :class:`ValueError` or
:class:`TypeError`, so ``except ValueError`` in user code keeps working; the subclasses let
callers tell the kinds apart.
"""

from __future__ import annotations


class MixtureError(ValueError):
    """A mixture specification is invalid (degree outside 1..8, negative or non-finite gamma,
    empty mixture, malformed text)."""


class MixtureTypeError(MixtureError, TypeError):
    """A mixture specification of the wrong type: not a mapping (or pairs), a degree that is not
    an integer, a gamma that is not a real number (text, a flag). Both a :class:`MixtureError`
    (so a :class:`ValueError`) and a :class:`TypeError`."""


class ShapeError(ValueError):
    """An array has the wrong shape or length; the message names the expected and the actual."""


class NonFiniteError(ValueError):
    """An input array holds NaN or infinity, or a kernel's result overflowed float64 although
    its inputs were finite (for example at |x| = 1e300)."""


class InsufficientMemoryError(MemoryError, ValueError):
    """An instance would need more memory than the machine has available.

    Raised before allocating when the memory check refuses (the message gives the bytes
    needed and available), and when an allocation itself fails (a check turned off with
    ``check_memory=False``, or memory taken by others after the check).
    """


class InstanceFileError(ValueError):
    """An instance file cannot be loaded: missing, unreadable, truncated, corrupted, of another
    format or a newer format version, or it no longer regenerates the saved instance. The
    message names the file and the problem."""


class ResultFileError(ValueError):
    """A result file cannot be loaded: missing, unreadable, truncated, corrupted, of another
    format or version. The message names the file and the problem."""


class OutputPathError(OSError, ValueError):
    """A folder to write into cannot be made (a file stands at its path or at a parent's, the
    permissions or the file system forbid it), or a file cannot be written there (a folder
    stands at its path, the file system refuses it). Folders are checked before any work that
    would write there; the message names the path the caller gave."""


class CoreError(RuntimeError):
    """An internal invariant of the Rust core failed. This is a bug: please report it."""
