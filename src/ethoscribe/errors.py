"""ethoscribe's own error types, and :func:`listed` for the lists in their messages.

Every error a user can cause by their input is raised as one of these, with a message that says
what was expected, what was found, where (file, column, keypoint, frame) and how to fix it.
"""

from __future__ import annotations

from collections.abc import Iterable


class EthoscribeError(Exception):
    """Base class of every error ethoscribe raises on purpose."""


class InputError(EthoscribeError, ValueError):
    """Bad input data or parameters: the message names the source and the fix."""


class NotFittedError(EthoscribeError, RuntimeError):
    """An estimator was used before ``fit``."""


class WorkspaceError(EthoscribeError):
    """A workspace on disk is locked, damaged or from an incompatible version."""


class UnsafeFileError(EthoscribeError):
    """A file would need code execution (pickle) or points outside its folder: refused."""


class InputWarning(UserWarning):
    """Input that was read, but may not have been read as meant (the message says how to say)."""


class JournalWarning(UserWarning):
    """Lines of a workspace's edit journal that could not be read and were skipped."""


def counted(n: int, noun: str, plural: str | None = None) -> str:
    """``n`` and the noun in the number it takes, for a message or a title.

    Examples
    --------
    >>> counted(1, "motif")
    '1 motif'
    >>> counted(7, "session")
    '7 sessions'
    >>> counted(2, "body", "bodies")
    '2 bodies'
    """
    return f"{n} {noun if n == 1 else (plural or noun + 's')}"


def listed(items: Iterable[object], limit: int = 5, sep: str = ", ") -> str:
    """``items`` written out for a message: the first ``limit`` of them, then how many more.

    Every message that names sessions, keypoints, files or values shortens a long list this
    way, so a reader always learns how many were left out.

    Parameters
    ----------
    items : the things to name, already in the form to show (e.g. ``repr`` of names)
    limit : how many to write out
    sep : what goes between two of them

    Examples
    --------
    >>> listed(["'a'", "'b'"])
    "'a', 'b'"
    >>> listed(range(8), limit=3)
    '0, 1, 2 and 5 more'
    >>> listed(["row 2: a.csv", "row 5: b.csv", "row 9: c.csv"], limit=2, sep="; ")
    'row 2: a.csv; row 5: b.csv and 1 more'
    """
    shown = [str(item) for item in items]
    if len(shown) <= limit:
        return sep.join(shown)
    return f"{sep.join(shown[:limit])} and {len(shown) - limit} more"
