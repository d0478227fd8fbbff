"""ethoscribe: from keypoint tracks to a named, trustworthy ethogram."""

from __future__ import annotations

from ethoscribe.errors import EthoscribeError, InputError, NotFittedError
from ethoscribe.pose import PoseTracks

__version__ = "0.1.0"

__all__ = ["EthoscribeError", "InputError", "NotFittedError", "PoseTracks", "__version__"]
