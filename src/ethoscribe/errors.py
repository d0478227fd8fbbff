"""ethoscribe's own error types.

Every error a user can cause by their input is raised as one of these, with a message that says
what was expected, what was found, where (file, column, keypoint, frame) and how to fix it.
"""

from __future__ import annotations


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
