"""Pose tracks in NWB files (Neurodata Without Borders), via the ndx-pose extension.

A ``PoseEstimation`` container holds one ``PoseEstimationSeries`` per keypoint (data of shape
(frames, 2 or 3), a confidence per frame, and a rate or time stamps). One container is one
animal. pynwb and ndx-pose are optional: they are imported only when an NWB file is used.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.io._atomic import atomic_path
from ethoscribe.io._tables import (
    check_file,
    check_fps,
    keypoint_renames,
    make_tracks,
    name_list,
    renamed_keypoints,
)
from ethoscribe.io._timing import frames_from_times
from ethoscribe.pose import PoseTracks

_UNITS = {
    "px": "px", "pixel": "px", "pixels": "px",
    "mm": "mm", "millimeter": "mm", "millimeters": "mm", "millimetre": "mm", "millimetres": "mm",
    "cm": "cm", "centimeter": "cm", "centimeters": "cm", "centimetre": "cm", "centimetres": "cm",
    "m": "m", "meter": "m", "meters": "m", "metre": "m", "metres": "m",
}  # fmt: skip
_NWB_UNITS = {"px": "pixels", "mm": "millimeters", "cm": "centimeters", "m": "meters"}
_DEFAULT_NAME = "PoseEstimation"


def _import_nwb() -> tuple[Any, Any]:
    try:
        import ndx_pose
        import pynwb
    except ImportError as exc:
        raise InputError(
            f"NWB files need the optional packages pynwb and ndx-pose ({exc}); install them "
            'with: pip install "ethoscribe[nwb]"'
        ) from None
    return pynwb, ndx_pose


def read_nwb(
    path: str | os.PathLike[str],
    pose_estimation: str | Sequence[str] | None = None,
    fps: float | None = None,
    session: str | None = None,
    units: str | None = None,
    keypoints: list[str] | str | None = None,
    rename_keypoints: Mapping[str, str] | str | None = None,
) -> PoseTracks:
    """Read pose-estimation series from an NWB file.

    Parameters
    ----------
    path : str or Path
        The ``.nwb`` file.
    pose_estimation : str, list of str or "all", optional
        Which ``PoseEstimation`` container(s) to read; each becomes one animal (sorted by name).
        Default: all of them (as ``write_nwb`` writes one container per animal).
    fps : float, optional
        Overrides the rate stored in the file (or estimated from its time stamps).
    session : str, optional
        Session name; defaults to the file stem.
    units : str, optional
        Overrides the units stored with the series ("pixels" -> "px", "millimeters" -> "mm").
    keypoints : list of str, optional
        Keep only these keypoints, in this order (default: the skeleton's order; a text: names
        separated by commas).
    rename_keypoints : mapping or str, optional
        New names for the series' keypoints, ``{"nose": "snout"}`` or ``"nose=snout,..."``
        (OLD=NEW), as ``read_tidy`` takes them; ``keypoints`` then takes the new names.

    Returns
    -------
    PoseTracks
        coords (frames, animals, keypoints, dims), with the container names as animal ids.

    Examples
    --------
    >>> tracks = read_nwb("session1.nwb")  # doctest: +SKIP
    """
    path = check_file(path)
    fps = check_fps(fps, path)
    pynwb, ndx_pose = _import_nwb()
    try:
        io = pynwb.NWBHDF5IO(str(path), "r")
    except Exception as exc:  # h5py / pynwb raise many types for damaged or foreign files
        raise _unreadable(path, exc) from None
    with io:
        try:
            nwbfile = io.read()
        except Exception as exc:
            raise _unreadable(path, exc) from None
        found = [o for o in nwbfile.objects.values() if isinstance(o, ndx_pose.PoseEstimation)]
        chosen = _choose(path, found, pose_estimation)
        rename = keypoint_renames(rename_keypoints, path)
        parts = [_read_container(path, c, name_list(keypoints), rename) for c in chosen]
        meta = {"identifier": nwbfile.identifier, "session_id": nwbfile.session_id}
        if nwbfile.subject is not None and nwbfile.subject.subject_id:
            meta["subject"] = nwbfile.subject.subject_id
    return _combine(path, parts, chosen, fps, session, units, meta)


def _unreadable(path: Path, exc: Exception) -> InputError:
    return InputError(
        f"{path}: cannot be read as an NWB file ({type(exc).__name__}: {exc}); check that it is "
        "a complete NWB (HDF5) file"
    )


def _choose(path: Path, found: list[Any], wanted: str | Sequence[str] | None) -> list[Any]:
    by_name = {}
    for obj in sorted(found, key=lambda o: o.name):
        by_name.setdefault(obj.name, obj)
    if not by_name:
        raise InputError(f"{path}: holds no PoseEstimation container (ndx-pose); no pose tracks")
    if wanted is None:
        return list(by_name.values())  # every container, one animal each (sorted by name)
    names = list(by_name) if wanted == "all" else [wanted] if isinstance(wanted, str) else wanted
    missing = [n for n in names if n not in by_name]
    if missing or not names:
        raise InputError(
            f"{path}: no PoseEstimation container named {missing}; the file holds {list(by_name)}"
        )
    return [by_name[n] for n in sorted(names)]


def _read_container(
    path: Path, container: Any, keypoints: list[str] | None, rename: Mapping[str, str]
) -> dict[str, Any]:
    series = dict(container.pose_estimation_series)
    where = f"{path}: PoseEstimation '{container.name}'"
    if not series:
        raise InputError(f"{where} holds no PoseEstimationSeries")
    names = list(series)
    skeleton = getattr(container, "skeleton", None)
    if skeleton is not None and sorted(map(str, skeleton.nodes[:])) == sorted(names):
        names = [str(n) for n in skeleton.nodes[:]]  # keep the skeleton's order
    if rename:
        new = renamed_keypoints(names, rename, where)
        series = {n: series[old] for old, n in zip(names, new, strict=True)}
        names = new
    if keypoints is not None:
        missing = [k for k in keypoints if k not in series]
        if missing or not keypoints:
            raise InputError(f"{where}: no series for keypoint(s) {missing}; it has {names}")
        names = list(keypoints)
    data, conf, timing, unit = [], [], None, None
    for name in names:
        s = series[name]
        values = np.asarray(s.data[:], dtype=np.float64)
        if values.ndim != 2 or values.shape[1] not in (2, 3):
            msg = f"{where}: series '{name}' has data of shape {values.shape}; expected (frames, 2)"
            raise InputError(msg + " or (frames, 3)")
        if (s.conversion, s.offset) != (1.0, 0.0):
            values = values * s.conversion + s.offset  # NWB: stored value x conversion + offset
        data.append(values)
        c = s.confidence
        conf.append(np.full(len(values), np.nan) if c is None else np.asarray(c[:], np.float64))
        this = _timing(s)
        if timing is not None and not _same_timing(timing, this, len(data[0]), len(values)):
            msg = f"{where}: series '{name}' has other frame times than '{names[0]}'"
            raise InputError(msg + "; all keypoints must share one timing")
        timing, unit = timing or this, unit or s.unit
        if s.unit != unit:
            raise InputError(f"{where}: series '{name}' is in '{s.unit}', others in '{unit}'")
    dims = {d.shape[1] for d in data}
    if len(dims) > 1:
        raise InputError(f"{where}: mixes 2-D and 3-D series; all keypoints need the same dims")
    return {
        "coords": np.stack(data, axis=1),
        "confidence": np.stack(conf, axis=1),
        "has_confidence": any(s.confidence is not None for s in series.values()),
        "keypoints": names,
        "timing": timing,
        "unit": unit,
        "reference_frame": series[names[0]].reference_frame,
    }


def _timing(series: Any) -> tuple[Any, ...]:
    if series.timestamps is not None:
        return ("timestamps", np.asarray(series.timestamps[:], dtype=np.float64))
    return ("rate", float(series.rate), float(series.starting_time or 0.0))


def _same_timing(a: tuple[Any, ...], b: tuple[Any, ...], n_a: int, n_b: int) -> bool:
    if n_a != n_b or a[0] != b[0]:
        return False
    return bool(np.array_equal(a[1], b[1])) if a[0] == "timestamps" else a[1:] == b[1:]


def _combine(
    path: Path,
    parts: list[dict[str, Any]],
    chosen: list[Any],
    fps: float | None,
    session: str | None,
    units: str | None,
    meta: dict[str, Any],
) -> PoseTracks:
    first = parts[0]
    for part, c in zip(parts[1:], chosen[1:], strict=True):
        if part["keypoints"] != first["keypoints"] or part["coords"].shape != first["coords"].shape:
            raise InputError(
                f"{path}: PoseEstimation '{c.name}' differs from '{chosen[0].name}' in keypoints "
                "or length; read them one at a time with pose_estimation='name'"
            )
        if not _same_timing(part["timing"], first["timing"], 1, 1):
            raise InputError(f"{path}: PoseEstimation '{c.name}' has other frame times")
    n_rows = first["coords"].shape[0]
    if first["timing"][0] == "rate":
        fps = fps or first["timing"][1]
        frames, t0 = np.arange(n_rows), first["timing"][2]
    else:
        times = first["timing"][1]
        if n_rows > 1 and not (np.diff(times) > 0).all():
            raise InputError(f"{path}: the time stamps of the pose series must increase")
        frames, fps, t0 = frames_from_times(times, fps, path, "timestamps")
    if units is None:
        units = _UNITS.get(str(first["unit"]).strip().lower())
        if units is None:
            msg = f"{path}: unit '{first['unit']}' is not one of {sorted(_UNITS)}"
            raise InputError(msg + "; pass units=... yourself")
    coords = np.full((int(frames[-1]) + 1, len(parts), *first["coords"].shape[1:]), np.nan)
    conf = np.full(coords.shape[:3], np.nan)
    for a, part in enumerate(parts):
        coords[frames, a] = part["coords"]
        conf[frames, a] = part["confidence"]
    animals = [c.name for c in chosen]
    if animals == [_DEFAULT_NAME]:
        animals = ["animal0"]
    return make_tracks(
        path,
        coords=coords,
        confidence=conf if any(p["has_confidence"] for p in parts) else None,
        keypoints=first["keypoints"],
        animals=animals,
        fps=fps,
        units=units,
        session=session if session is not None else path.stem,
        meta={
            "source": str(path),
            "source_format": "nwb",
            "first_frame": round(t0 * fps),
            "start_time_s": t0,
            "reference_frame": first["reference_frame"],
            **{k: v for k, v in meta.items() if v is not None},
        },
    )


def write_nwb(
    tracks: PoseTracks,
    path: str | os.PathLike[str],
    session_description: str | None = None,
    session_start_time: datetime | None = None,
    identifier: str | None = None,
    reference_frame: str = "(0, 0) is the top-left corner of the video image",
) -> Path:
    """Save tracks as an NWB file (one PoseEstimation per animal), atomically.

    Each series stores ``rate=fps`` and ``starting_time=first_frame / fps``. Keypoint and animal
    names must not contain "/".

    Examples
    --------
    >>> write_nwb(tracks, "session1.nwb")  # doctest: +SKIP
    """
    pynwb, ndx_pose = _import_nwb()
    bad = [n for n in (*tracks.keypoints, *tracks.animals) if "/" in n]
    if bad:
        raise InputError(f"{path}: NWB names cannot contain '/'; rename {bad} before saving")
    start = int(tracks.meta.get("first_frame", 0)) / tracks.fps
    nwbfile = pynwb.NWBFile(
        session_description=session_description or f"pose tracks of session {tracks.session}",
        identifier=identifier or str(uuid.uuid4()),
        session_start_time=session_start_time or datetime.now(timezone.utc),
        session_id=tracks.session,
    )
    module = nwbfile.create_processing_module(name="behavior", description="pose tracks")
    skeletons, containers = [], []
    for a, animal in enumerate(tracks.animals):
        skeleton = ndx_pose.Skeleton(name=f"{animal}_skeleton", nodes=list(tracks.keypoints))
        series = [
            ndx_pose.PoseEstimationSeries(
                name=kp,
                data=tracks.coords[:, a, k],
                confidence=tracks.confidence[:, a, k],
                unit=_NWB_UNITS[tracks.units],
                reference_frame=reference_frame,
                rate=tracks.fps,
                starting_time=start,
            )
            for k, kp in enumerate(tracks.keypoints)
        ]
        skeletons.append(skeleton)
        containers.append(
            ndx_pose.PoseEstimation(
                name=animal,
                pose_estimation_series=series,
                skeleton=skeleton,
                description=f"keypoint tracks of {animal}",
            )
        )
    module.add(ndx_pose.Skeletons(skeletons=skeletons))
    for container in containers:
        module.add(container)
    with atomic_path(path) as tmp, pynwb.NWBHDF5IO(str(tmp), "w") as io:
        io.write(nwbfile)
    return Path(path)
