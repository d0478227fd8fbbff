"""The data model: keypoint tracks of one session.

``PoseTracks`` holds coordinates ``(frames, animals, keypoints, dims)`` with ``dims`` 2 or 3, a
confidence ``(frames, animals, keypoints)`` in [0, 1] (NaN where the tracker gave none), the
keypoint names, animal ids, frame rate and units. Missing points are NaN in ``coords``.
Everything downstream takes and returns these objects or plain arrays.
"""

from __future__ import annotations

import difflib
import re
import warnings
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any

import numpy as np

from ethoscribe.errors import InputError, InputWarning, listed

UNITS = ("px", "mm", "cm", "m")
_UNSAFE_NAME = re.compile(r"[\x00-\x1f\x7f/\\]|^[A-Za-z]:")


def check_file_name(name: str, what: str) -> str:
    """``name`` if it can be one file name inside a folder; ``InputError`` otherwise.

    Session names end up in file names inside a workspace, so ``"../../x"`` must never reach
    one: refused are ``"."``, ``".."``, path separators (``/``, ``\\``), a drive prefix
    (``C:``), control characters and names over 200 bytes.

    Examples
    --------
    >>> check_file_name("mouse_01", "session")
    'mouse_01'
    """
    too_long = len(name.encode("utf-8", "surrogatepass")) > 200
    if not name or name in (".", "..") or _UNSAFE_NAME.search(name) or too_long:
        msg = (
            f"{what} name {name!r} cannot be used: names become file names inside a workspace, "
            "so they must be 1-200 bytes long, must not be '.' or '..', and must not contain '/', "
            "'\\', a drive prefix like 'C:' or control characters. Rename it (the file name, the "
            "session= argument or the manifest's session column)."
        )
        raise InputError(msg)
    return name


def _names(values: Sequence[Any], what: str, session: str) -> tuple[str, ...]:
    names = tuple(str(v) for v in values)
    if any(not n.strip() for n in names):
        raise InputError(f"session '{session}': {what} names must not be empty; got {list(names)}")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"session '{session}': {what} names must be unique; repeated: {dup}")
    return names


@dataclass(frozen=True, eq=False)
class PoseTracks:
    """Keypoint tracks of one session.

    Parameters
    ----------
    coords : array, shape (frames, animals, keypoints, dims)
        Positions; ``dims`` is 2 (x, y) or 3 (x, y, z). NaN marks a missing point.
    confidence : array, shape (frames, animals, keypoints), optional
        Tracker confidence in [0, 1]; NaN where unknown. Defaults to 1 where coords are finite.
    keypoints : sequence of str
        Keypoint names, one per keypoint axis.
    animals : sequence of str, optional
        Animal ids; defaults to ``animal0, animal1, ...``.
    fps : float
        Frames per second (> 0).
    units : str
        ``"px"`` before calibration, or ``"mm"``, ``"cm"``, ``"m"``.
    session : str
        Session name (readers default to the file stem).
    meta : mapping
        Free metadata (source file, group, subject, calibration ...). Stored read-only.

    Examples
    --------
    >>> import numpy as np
    >>> t = PoseTracks(np.zeros((10, 1, 2, 2)), keypoints=["nose", "tail"], fps=30)
    >>> t.n_frames, t.n_keypoints, t.n_dims
    (10, 2, 2)
    """

    coords: np.ndarray
    confidence: np.ndarray | None = None
    keypoints: Sequence[str] = ()
    animals: Sequence[str] | None = None
    fps: float = 0.0
    units: str = "px"
    session: str = "session"
    meta: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        s = check_file_name(str(self.session), "session")
        try:
            coords = np.asarray(self.coords, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InputError(f"session '{s}': coordinates must be numeric ({exc})") from None
        if coords.ndim != 4:
            raise InputError(
                f"session '{s}': coords must have shape (frames, animals, keypoints, dims); "
                f"got {coords.ndim} dimensions with shape {coords.shape}"
            )
        n_frames, n_animals, n_kp, n_dims = coords.shape
        if n_dims not in (2, 3):
            raise InputError(f"session '{s}': dims must be 2 (x, y) or 3 (x, y, z); got {n_dims}")
        if n_frames < 2:
            raise InputError(
                f"session '{s}': at least 2 frames are needed to measure movement; got {n_frames}"
            )
        if n_kp < 1 or n_animals < 1:
            raise InputError(f"session '{s}': no keypoints or no animals (shape {coords.shape})")
        if np.isinf(coords).any():
            raise InputError(f"session '{s}': coordinates contain infinite values")
        keypoints = _names(self.keypoints, "keypoint", s)
        if len(keypoints) != n_kp:
            raise InputError(
                f"session '{s}': {n_kp} keypoints in coords but {len(keypoints)} names given "
                f"({list(keypoints)})"
            )
        animals = (
            tuple(f"animal{i}" for i in range(n_animals))
            if self.animals is None
            else _names(self.animals, "animal", s)
        )
        if len(animals) != n_animals:
            raise InputError(
                f"session '{s}': {n_animals} animals in coords but {len(animals)} ids given"
            )
        if self.confidence is None:
            conf = np.where(np.isfinite(coords).all(axis=-1), 1.0, np.nan)
        else:
            try:
                conf = np.asarray(self.confidence, dtype=np.float64)
            except (TypeError, ValueError) as exc:
                raise InputError(f"session '{s}': confidence must be numeric ({exc})") from None
            if conf.shape != coords.shape[:3]:
                raise InputError(
                    f"session '{s}': confidence must have shape {coords.shape[:3]} "
                    f"(frames, animals, keypoints); got {conf.shape}"
                )
            finite = conf[np.isfinite(conf)]
            if finite.size and (finite.min() < 0 or finite.max() > 1):
                raise InputError(
                    f"session '{s}': confidence must lie in [0, 1]; found values from "
                    f"{finite.min():g} to {finite.max():g}. Rescale it (e.g. divide by the "
                    "maximum)."
                )
            if np.isinf(conf).any():
                raise InputError(f"session '{s}': confidence contains infinite values")
        try:
            fps = float(self.fps)
        except (TypeError, ValueError):
            fps = float("nan")
        if not np.isfinite(fps) or fps <= 0:
            raise InputError(
                f"session '{s}': fps must be a positive number of frames per second; got "
                f"{self.fps!r}. Pass fps=... or give it in the manifest."
            )
        if self.units not in UNITS:
            raise InputError(f"session '{s}': units must be one of {UNITS}; got {self.units!r}")
        coords.setflags(write=False)
        conf.setflags(write=False)
        object.__setattr__(self, "coords", coords)
        object.__setattr__(self, "confidence", conf)
        object.__setattr__(self, "keypoints", keypoints)
        object.__setattr__(self, "animals", animals)
        object.__setattr__(self, "fps", fps)
        object.__setattr__(self, "session", s)
        object.__setattr__(self, "meta", MappingProxyType(dict(self.meta)))

    # --- shape helpers -------------------------------------------------------------------
    @property
    def n_frames(self) -> int:
        return self.coords.shape[0]

    @property
    def n_animals(self) -> int:
        return self.coords.shape[1]

    @property
    def n_keypoints(self) -> int:
        return self.coords.shape[2]

    @property
    def n_dims(self) -> int:
        return self.coords.shape[3]

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.fps

    @property
    def times(self) -> np.ndarray:
        """Time of each frame in seconds, shape (frames,)."""
        return np.arange(self.n_frames) / self.fps

    def keypoint_index(self, name: str) -> int:
        """Index of keypoint ``name``; a clear error lists the known names."""
        try:
            return self.keypoints.index(name)  # type: ignore[union-attr]
        except ValueError:
            raise InputError(
                f"session '{self.session}': no keypoint named '{name}'; "
                f"known keypoints: {list(self.keypoints)}"
            ) from None

    def replace(self, **changes: Any) -> PoseTracks:
        """A copy with some fields changed (validated again)."""
        if "meta" in changes:
            changes["meta"] = {**self.meta, **changes["meta"]}
        else:
            changes["meta"] = dict(self.meta)
        return replace(self, **changes)

    def select_animal(self, animal: str) -> PoseTracks:
        """Tracks of one animal only."""
        if animal not in self.animals:  # type: ignore[operator]
            raise InputError(
                f"session '{self.session}': no animal '{animal}'; known: {list(self.animals)}"
            )
        i = self.animals.index(animal)  # type: ignore[union-attr]
        return self.replace(
            coords=self.coords[:, i : i + 1],
            confidence=self.confidence[:, i : i + 1],
            animals=[animal],
        )

    def __repr__(self) -> str:
        return (
            f"PoseTracks(session={self.session!r}, frames={self.n_frames}, "
            f"animals={list(self.animals)}, keypoints={len(self.keypoints)}, "
            f"dims={self.n_dims}, fps={self.fps:g}, units={self.units!r})"
        )


# A session lacking some of the study's keypoints is read with them never seen when it still
# has at least this share of them (a frame is scored when 60 % of the body is seen, the model's
# default min_body_seen); with fewer, or with names of its own, it is refused by the check.
PAD_SHARE = 0.6
# Ends a warning said per session, so that the same warning of many sessions is said once,
# naming them (``ethoscribe.workspace.runs``, labelling in workers)
IN_SESSIONS = "; session(s): "


def enough_keypoints(n_have: int, n_study: int) -> bool:
    """Whether ``n_have`` of the study's ``n_study`` keypoints are enough to read a session (or
    stream a tracker) with the others never seen: at least ``PAD_SHARE`` of them.

    Examples
    --------
    >>> enough_keypoints(6, 10), enough_keypoints(5, 10)
    (True, False)
    """
    return n_have >= PAD_SHARE * n_study


def match_keypoint_order(
    sessions: Sequence[PoseTracks],
    keypoints: Sequence[str] | None = None,
    warn: bool = True,
    roles: Mapping[str, str] | None = None,
) -> list[PoseTracks]:
    """Sessions whose keypoints are ``keypoints`` in another order, put in that order; names
    that differ from them only in case or surrounding spaces (``'Nose '``) take their spelling,
    with an ``InputWarning``.

    Default ``keypoints``: the largest keypoint set among the sessions when every other set is
    part of it, else the first session's. Readers keep each file's order (first appearance in a
    table, the series of an NWB container), so one study exported by different tools can list
    the same keypoints differently. A session that lacks some of them (a keypoint added to the
    tracker later in the study) but has at least ``PAD_SHARE`` of them and no others is read
    with the lacking ones never seen (NaN, confidence 0), with an ``InputWarning``: its frames
    are scored from the keypoints it has, as frames with lost keypoints are. Sessions with other
    keypoint sets are returned unchanged for :func:`check_same_body_plan` to refuse.

    Given ``keypoints`` (a fitted model's), a session may also have keypoints beyond them (a
    new cohort tracked with more, or a keypoint left out of the fit): those are left out, with
    an ``InputWarning``, unless one of them looks like a lacking keypoint misspelt (then the
    session is returned unchanged and refused with that hint). ``warn=False``: no warnings
    (sessions read and reported on already). ``roles``: what some of ``keypoints`` do in the
    model (e.g. ``{"tail": "the body axis's end (tail -> nose)"}``), said when one is lacking.

    Examples
    --------
    >>> import numpy as np
    >>> a = PoseTracks(np.zeros((2, 1, 2, 2)), np.ones((2, 1, 2)), ["nose", "tail"], fps=30)
    >>> b = PoseTracks(np.zeros((2, 1, 2, 2)), np.ones((2, 1, 2)), ["tail", "nose"], fps=30)
    >>> [s.keypoints for s in match_keypoint_order([a, b])]
    [('nose', 'tail'), ('nose', 'tail')]
    """
    if not sessions:
        return []
    ref = tuple(
        study_keypoints([s.keypoints for s in sessions]) if keypoints is None else keypoints
    )
    fold = {_folded(k): k for k in ref}
    out, respelt, padded, unused, lost = [], [], [], [], set()
    for s in sessions:
        names = [fold.get(_folded(k), k) for k in s.keypoints]  # 'Nose ' in one file: 'nose'
        if len(set(names)) == len(names) and names != list(s.keypoints):
            if set(names) <= set(ref):
                respelt.append(f"'{s.session}'")
                s = s.replace(keypoints=names)
        lacking = [k for k in ref if k not in s.keypoints]
        extra = [k for k in s.keypoints if k not in ref]
        if extra and keypoints is not None and not keypoint_mismatch(ref, s.keypoints)[1]:
            unused.append((f"'{s.session}'", extra))
            s = _with_keypoints(s, tuple(k for k in s.keypoints if k in ref))
        if lacking and set(s.keypoints) < set(ref) and enough_keypoints(len(s.keypoints), len(ref)):
            padded.append(f"'{s.session}' ({', '.join(lacking)})")
            lost.update(lacking)
            s = _with_keypoints(s, ref)
        elif tuple(s.keypoints) != ref and sorted(s.keypoints) == sorted(ref):
            s = _with_keypoints(s, ref)  # the same keypoints in another order
        out.append(s)
    if respelt and warn:
        warnings.warn(
            f"session(s) {', '.join(respelt)} write keypoint names in another case or with "
            f"spaces around them; read as {list(ref)}",
            InputWarning,
            stacklevel=2,
        )
    whose = "the study has" if keypoints is None else "the model was fitted on"
    if unused and warn:
        left_out = list(dict.fromkeys(k for _, extra in unused for k in extra))
        warnings.warn(
            f"keypoint(s) the model was not fitted on are left out ({', '.join(left_out)}; the "
            f"model reads {len(ref)}: {list(ref)}){IN_SESSIONS}{listed(n for n, _ in unused)}",
            InputWarning,
            stacklevel=2,
        )
    if padded and warn:
        central = [f"{k!r} is {roles[k]}" for k in ref if k in lost and k in (roles or {})]
        kept = ",".join(k for k in ref if k not in lost)
        text = (
            f"some keypoint(s) {whose} ({len(ref)}: {list(ref)}) are lacking; read as never seen "
            "there, so those sessions' frames are scored from the keypoints they have "
            "(body_seen in the labels says how much of the body was seen)."
            + (
                " To leave such keypoints out of every session instead, name the keypoints to "
                "read (keypoints=[...]; command line: --reader-option keypoints=a,b,c)."
                if keypoints is None
                else ""
            )
            + (
                f" {'; '.join(central)}: every frame's body frame then rests on a guessed "
                "position, which can shift the time budgets. Fit a model on the keypoints "
                f"every cohort has (command line: discover --reader-option keypoints={kept})."
                if central
                else ""
            )
        )
        warnings.warn(
            f"{text.rstrip('.')}{IN_SESSIONS}{', '.join(padded)}", InputWarning, stacklevel=2
        )
    return out


def study_keypoints(keypoints: Sequence[Sequence[str]]) -> tuple[str, ...]:
    """A study's keypoints from each session's: the largest set when every other set is part
    of it (names compared ignoring case and surrounding spaces), else the first session's.

    Examples
    --------
    >>> study_keypoints([["nose", "tail"], ["nose", "neck", "tail"]])
    ('nose', 'neck', 'tail')
    >>> study_keypoints([["nose", "tail"], ["snout", "tail"]])
    ('nose', 'tail')
    """
    largest = max(keypoints, key=len)
    folded = {_folded(k) for k in largest}
    if all({_folded(k) for k in names} <= folded for names in keypoints):
        return tuple(largest)
    return tuple(keypoints[0])


def keypoints_seen(sessions: Sequence[PoseTracks]) -> np.ndarray:
    """Per keypoint of ``sessions`` (one keypoint set): tracked in any frame of any animal.

    Examples
    --------
    >>> c = np.zeros((2, 1, 2, 2)); c[:, :, 1] = np.nan
    >>> keypoints_seen([PoseTracks(c, keypoints=["a", "b"], fps=30)]).tolist()
    [True, False]
    """
    seen = np.zeros(sessions[0].n_keypoints, dtype=bool)
    for s in sessions:
        seen |= np.isfinite(s.coords).all(axis=-1).any(axis=(0, 1))
        if seen.all():
            break
    return seen


def without_unseen_keypoints(
    sessions: Sequence[PoseTracks],
) -> tuple[list[PoseTracks], list[str]]:
    """``sessions`` (one keypoint set) without the keypoints that have no tracked position in
    any frame of any of them, and those keypoints' names.

    Such a keypoint (below the confidence threshold everywhere, e.g. always hidden from the
    camera) carries nothing to fit, and no frame would have the whole body. When no keypoint
    is seen at all the sessions are returned unchanged, for the feature pipeline to refuse.

    Examples
    --------
    >>> import numpy as np
    >>> c = np.zeros((2, 1, 3, 2)); c[:, :, 1] = np.nan
    >>> kept, dropped = without_unseen_keypoints([PoseTracks(c, keypoints=["a", "b", "c"], fps=30)])
    >>> kept[0].keypoints, dropped
    (('a', 'c'), ['b'])
    """
    sessions = list(sessions)
    if not sessions:
        return sessions, []
    seen = keypoints_seen(sessions)
    if seen.all() or not seen.any():
        return sessions, []
    keep = tuple(k for k, ok in zip(sessions[0].keypoints, seen, strict=True) if ok)
    dropped = [k for k, ok in zip(sessions[0].keypoints, seen, strict=True) if not ok]
    return [_with_keypoints(s, keep) for s in sessions], dropped


def _with_keypoints(s: PoseTracks, keypoints: tuple[str, ...]) -> PoseTracks:
    """``s`` with ``keypoints`` in that order; those it lacks never seen (NaN, confidence 0)."""
    f, a, _, d = s.coords.shape
    have = [j for j, k in enumerate(keypoints) if k in s.keypoints]
    order = [s.keypoints.index(keypoints[j]) for j in have]
    coords = np.full((f, a, len(keypoints), d), np.nan, dtype=s.coords.dtype)
    conf = np.zeros((f, a, len(keypoints)), dtype=s.confidence.dtype)
    coords[:, :, have], conf[:, :, have] = s.coords[:, :, order], s.confidence[:, :, order]
    return s.replace(coords=coords, confidence=conf, keypoints=keypoints)


def _folded(name: str) -> str:
    return name.strip().casefold()


def keypoint_mismatch(expected: Sequence[str], got: Sequence[str]) -> tuple[str, str]:
    """How keypoints ``got`` differ from ``expected``: the missing and extra names (each in its
    own order), and a sentence naming each extra name that looks like a missing one (a
    misspelling) with the reader option that reads it so (:func:`rename_option`).

    Examples
    --------
    >>> keypoint_mismatch(["Snout", "tail"], ["Snuot", "tail"])[1]  # doctest: +NORMALIZE_WHITESPACE
    " 'Snuot' looks like 'Snout': pass rename_keypoints={'Snuot': 'Snout'}
    (command line: --reader-option rename_keypoints=Snuot=Snout) to read it so."
    """
    missing = [k for k in expected if k not in got]
    extra = [k for k in got if k not in expected]
    alike = {e: difflib.get_close_matches(e, missing, n=1) for e in extra}
    pairs = {e: m[0] for e, m in alike.items() if m}
    hint = ""
    if pairs:
        said = ", ".join(f"'{e}' looks like '{m}'" for e, m in pairs.items())
        them = "it" if len(pairs) == 1 else "them"
        hint = f" {said}: pass {rename_option(pairs)} to read {them} so."
    return f"missing {missing}, extra {extra}", hint


def rename_option(pairs: Mapping[str, str]) -> str:
    """The reader option that reads keypoints under other names (old -> new), as Python and
    command-line text in the form the command line's messages rewrite.

    Examples
    --------
    >>> rename_option({"nose": "snout"})
    "rename_keypoints={'nose': 'snout'} (command line: --reader-option rename_keypoints=nose=snout)"
    """
    cli = ",".join(f"{old}={new}" for old, new in pairs.items())
    return f"rename_keypoints={dict(pairs)} (command line: --reader-option rename_keypoints={cli})"


def check_same_body_plan(sessions: Sequence[PoseTracks]) -> None:
    """Raise if sessions of one study differ in keypoint names or dimensionality.

    A model is fitted on one body plan; mixing keypoint sets or 2-D with 3-D would silently
    misalign features.
    """
    if not sessions:
        raise InputError("no sessions given")
    ref = sessions[0]
    for s in sessions[1:]:
        if tuple(s.keypoints) != tuple(ref.keypoints):
            source = s.meta.get("source")
            file = f" in {source}" if source else ""
            differ, hint = keypoint_mismatch(ref.keypoints, s.keypoints)
            shared = [k for k in ref.keypoints if k in s.keypoints]
            keep = ""
            if shared and set(s.keypoints) != set(ref.keypoints):
                keep = (
                    f" To keep the keypoints both have: keypoints={shared} (command line: "
                    f"--reader-option keypoints={','.join(shared)})."
                )
            few = ""
            small, large = sorted((ref, s), key=lambda t: len(t.keypoints))
            if set(small.keypoints) < set(large.keypoints):  # read as lost only up to a point
                few = (
                    f" Session '{small.session}' has {len(small.keypoints)} of the "
                    f"{len(large.keypoints)}: a session lacking some keypoints is read with them "
                    f"never seen only when it has at least {PAD_SHARE * 100:.0f} % of them."
                )
            raise InputError(
                f"session '{s.session}' has different keypoints from session '{ref.session}' "
                f"({differ}, or another order){file}. All sessions of one study must share one "
                f"keypoint set.{hint or _other_name_hint(sessions, ref, s)}{few}{keep}"
            )
        if s.n_dims != ref.n_dims:
            raise InputError(
                f"session '{s.session}' is {s.n_dims}-D but session '{ref.session}' is "
                f"{ref.n_dims}-D; a study must not mix 2-D and 3-D tracks: study them apart, "
                "or leave the z column out of the 3-D files (x and y only)"
            )


def _other_name_hint(sessions: Sequence[PoseTracks], a: PoseTracks, b: PoseTracks) -> str:
    """How to read a keypoint that sessions ``a`` and ``b`` name differently: where each has one
    keypoint the other lacks, the reader option naming the odd one's as the other's (the
    session whose keypoints fewer sessions share is the odd one); otherwise the option's form."""
    extra_a = [k for k in a.keypoints if k not in b.keypoints]
    extra_b = [k for k in b.keypoints if k not in a.keypoints]
    if len(extra_a) == len(extra_b) == 1:
        sets = Counter(frozenset(t.keypoints) for t in sessions)
        a_odd = sets[frozenset(a.keypoints)] < sets[frozenset(b.keypoints)]
        odd, usual = (a, b) if a_odd else (b, a)
        old, new = (extra_a[0], extra_b[0]) if odd is a else (extra_b[0], extra_a[0])
        return (
            f" If '{old}' of session '{odd.session}' is '{new}' of session '{usual.session}', "
            f"pass {rename_option({old: new})} to read it so."
        )
    option = rename_option({"OLD": "NEW"})
    return f" To read a keypoint under another name, pass {option} with the file's name first."


# A side token: "left"/"right" or a lone "l"/"r", bounded by the name's start or end, a separator
# or a change of case ("fore_l", "L_ear", "earL", "leftEar", "left-ear").
_SIDE_TOKEN = re.compile(
    r"(?:(?:^|(?<=[_\-.\s0-9]))(left|right|Left|Right|LEFT|RIGHT|l|r|L|R)"
    r"|(?<=[a-z0-9])(Left|Right|LEFT|RIGHT|L|R))"
    r"(?=$|[_\-.\s0-9]|[A-Z])"
)
_MIRROR = {
    "left": "right", "right": "left", "Left": "Right", "Right": "Left",
    "LEFT": "RIGHT", "RIGHT": "LEFT", "l": "r", "r": "l", "L": "R", "R": "L",
}  # fmt: skip


def propose_swap_pairs(keypoints: Sequence[str]) -> tuple[tuple[str, str], ...]:
    """Left/right keypoint pairs read from the names (``left_ear``/``right_ear``, ``fore_l``/
    ``fore_r``, ``L_ear``/``R_ear``, ``earL``/``earR``, ``leftEar``/``rightEar``).

    A name is paired when exactly one of its words is a side word (``left``, ``right``, or a lone
    ``l``/``r``/``L``/``R`` set off by a separator or a change of case) and the name with that
    word mirrored is also a keypoint. Pairs come left side first, in keypoint order.

    Examples
    --------
    >>> propose_swap_pairs(["nose", "left_ear", "right_ear", "fore_l", "fore_r", "tail"])
    (('left_ear', 'right_ear'), ('fore_l', 'fore_r'))
    >>> propose_swap_pairs(["lip", "rump", "tail_base"])
    ()
    """
    names = [str(k) for k in keypoints]
    present = set(names)
    pairs: list[tuple[str, str]] = []
    used: set[str] = set()
    for name in names:
        hits = list(_SIDE_TOKEN.finditer(name))
        if len(hits) != 1 or name in used:
            continue
        m = hits[0]
        word = m.group(1) or m.group(2)
        mirror = name[: m.start()] + _MIRROR[word] + name[m.end() :]
        if mirror == name or mirror not in present or mirror in used:
            continue
        if len(list(_SIDE_TOKEN.finditer(mirror))) != 1:
            continue
        left_first = word.lower() in ("left", "l")
        pairs.append((name, mirror) if left_first else (mirror, name))
        used.update((name, mirror))
    return tuple(pairs)
