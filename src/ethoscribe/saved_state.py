"""The one header every saved state carries: what it is (``kind``) and its layout version.

Every ``to_state`` of an estimator, and every JSON record of a workspace, starts with
``{"kind": "ethoscribe.<Thing>", "format_version": <int>, "ethoscribe_version": "<x.y.z>"}``;
readers check ``kind`` and ``format_version`` with :func:`check_header` before anything else, so
a foreign or newer file is refused with one clear message.

Examples
--------
>>> meta = header("ethoscribe.Demo", 1)
>>> check_header(meta, "ethoscribe.Demo", 1, "demo state")
>>> sorted(meta)
['ethoscribe_version', 'format_version', 'kind']
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ethoscribe import __version__
from ethoscribe.errors import InputError


def header(kind: str, format_version: int) -> dict[str, Any]:
    """The header fields of a saved state of ``kind`` in layout ``format_version``."""
    return {"kind": kind, "format_version": int(format_version), "ethoscribe_version": __version__}


def check_header(
    meta: Any,
    kind: str,
    format_version: int,
    what: str,
    legacy: Mapping[str, Any] | None = None,
) -> None:
    """Refuse ``meta`` unless it is a mapping of ``kind`` in layout ``format_version``.

    ``legacy``: fields that identify the same layout as saved before the header was shared
    (e.g. ``{"estimator": "FeaturePipeline"}``); such files keep loading.
    """
    if not isinstance(meta, Mapping):
        raise InputError(f"{what}: expected a JSON object, got {type(meta).__name__}")
    if legacy and "kind" not in meta and all(meta.get(k) == v for k, v in legacy.items()):
        return
    found, version = meta.get("kind"), meta.get("format_version", 1)
    if found != kind:
        name = kind.removeprefix("ethoscribe.")
        raise InputError(f"{what}: not a {name} state (kind={found!r:.60})")
    if version != format_version:
        raise InputError(
            f"{what}: saved in format version {version!r:.20} by ethoscribe "
            f"{meta.get('ethoscribe_version', '?')!s:.20}; this ethoscribe ({__version__}) reads "
            f"version {format_version}. Save it again with this version, or install the "
            "matching ethoscribe."
        )
