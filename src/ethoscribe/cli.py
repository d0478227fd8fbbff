"""Batch commands: each parses its options and calls one library function; no science here."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from ethoscribe import __version__
from ethoscribe.errors import EthoscribeError


def _states(value: str) -> int | str:
    if value == "auto":
        return value
    try:
        n = int(value)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"--states takes a whole number or 'auto', not {value!r}"
        ) from None
    if n < 1:
        raise argparse.ArgumentTypeError("--states must be at least 1")
    return n


def _axis(value: str) -> tuple[str, str]:
    parts = [p.strip() for p in value.split(",")]
    if len(parts) != 2 or not all(parts):
        raise argparse.ArgumentTypeError(
            f"--axis takes two keypoint names, tail side first: FROM,TO (got {value!r})"
        )
    return parts[0], parts[1]


def _add_reading_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "inputs",
        nargs="*",
        type=Path,
        metavar="POSE_FILE_OR_FOLDER",
        help="tidy-table pose files (CSV/Parquet) or folders of them",
    )
    p.add_argument(
        "--manifest", type=Path, help="session manifest CSV (session, path, fps, group, ...)"
    )
    p.add_argument("--fps", type=float, help="frame rate for files whose manifest row gives none")
    p.add_argument("--quiet", action="store_true", help="no progress bars")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ethoscribe",
        description="From keypoint tracks to a named ethogram. Outputs support, not replace, "
        "expert review and the local animal-welfare and ethics rules.",
    )
    parser.add_argument("--version", action="version", version=f"ethoscribe {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    d = sub.add_parser("discover", help="clean, featurise and segment sessions into motifs")
    _add_reading_options(d)
    d.add_argument("--out", type=Path, required=True, help="output folder (a workspace)")
    d.add_argument("--origin", help="keypoint at the body centre (default: centroid)")
    d.add_argument(
        "--axis", type=_axis, help="body axis as FROM,TO keypoints (tail side to head side)"
    )
    d.add_argument("--min-confidence", type=float, help="mask points below this tracker confidence")
    d.add_argument("--states", type=_states, default="auto", help="number of motifs, or 'auto'")
    d.add_argument(
        "--method",
        choices=["hmm", "changepoint", "prediction_error"],
        default="hmm",
        help="Gaussian HMM (default) or change points clustered into motifs",
    )
    d.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    _add_batch_options(d)
    d.add_argument(
        "--fit-frames",
        type=_fit_frames,
        default=1_000_000,
        help="fit on at most this many frames, in blocks from every session ('all': every "
        "frame; default 1000000)",
    )

    lab = sub.add_parser("label", help="label new sessions with a saved model (same motif names)")
    lab.add_argument("model", type=Path, help="a workspace folder or its model/ folder")
    _add_reading_options(lab)
    lab.add_argument("--out", type=Path, required=True, help="output folder")
    _add_batch_options(lab)

    c = sub.add_parser("compare", help="group statistics and the HTML report of a discover folder")
    c.add_argument("workspace", type=Path, help="folder written by 'ethoscribe discover'")
    c.add_argument(
        "--manifest", type=Path, help="CSV with a session column and the grouping column"
    )
    c.add_argument("--out", type=Path, required=True, help="output folder")
    c.add_argument("--by", default="group", help="grouping column of the manifest (default: group)")
    c.add_argument("--test", choices=["permutation", "rank"], default="permutation")
    c.add_argument(
        "--paired", action="store_true", help="paired design: subjects under each condition"
    )
    c.add_argument("--seed", type=int, default=0)

    s = sub.add_parser("simulate", help="write simulated example sessions (invented animals)")
    s.add_argument("--out", type=Path, required=True)
    s.add_argument("--sessions", type=int, default=8, help="sessions per group")
    s.add_argument("--duration", type=float, default=240.0, help="seconds per session")
    s.add_argument("--seed", type=int, default=0)
    return parser


def _add_batch_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--jobs",
        type=int,
        default=None,
        help="worker processes for the per-session work (default: every CPU)",
    )
    p.add_argument("--scheduler", help="address of a Dask scheduler to run per-session work on")
    p.add_argument(
        "--force",
        action="store_true",
        help="recompute cleaned and labelled sessions even when the workspace cache holds them",
    )


def _fit_frames(text: str) -> int | None:
    if text.strip().lower() == "all":
        return None
    try:
        value = int(float(text))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected a number of frames or 'all'; got {text!r}"
        ) from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected at least 1 frame; got {text!r}")
    return value


def _run(args: argparse.Namespace) -> str:
    # Imported here so that `ethoscribe --help` stays fast.
    from ethoscribe import workspace

    progress = not getattr(args, "quiet", False)
    if args.command == "discover":
        ws = workspace.discover(
            args.inputs,
            args.out,
            manifest=args.manifest,
            fps=args.fps,
            origin=args.origin,
            axis=args.axis,
            min_confidence=args.min_confidence,
            states=args.states,
            method=args.method,
            seed=args.seed,
            progress=progress,
            jobs=args.jobs,
            scheduler=args.scheduler,
            force=args.force,
            fit_frames=args.fit_frames,
        )
        return ws.describe()
    if args.command == "label":
        ws = workspace.label_sessions(
            args.model,
            args.inputs,
            args.out,
            manifest=args.manifest,
            fps=args.fps,
            progress=progress,
            jobs=args.jobs,
            scheduler=args.scheduler,
            force=args.force,
        )
        return ws.describe()
    if args.command == "compare":
        result = workspace.compare(
            args.workspace,
            args.out,
            manifest=args.manifest,
            by=args.by,
            test=args.test,
            paired=args.paired,
            seed=args.seed,
        )
        return result
    if args.command == "simulate":
        from ethoscribe.simulate import write_example_sessions

        write_example_sessions(
            args.out, n_per_group=args.sessions, duration_s=args.duration, seed=args.seed
        )
        return f"wrote simulated example sessions to {args.out}"
    raise AssertionError(args.command)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``ethoscribe`` command; returns the exit code."""
    args = build_parser().parse_args(argv)
    try:
        message = _run(args)
    except EthoscribeError as exc:
        print(f"ethoscribe {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"ethoscribe {args.command}: interrupted; finished outputs are kept", file=sys.stderr)
        return 130
    print(message)
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
