"""Batch commands: each parses its options and calls one library function; no science here."""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from tqdm import tqdm

from ethoscribe import __version__
from ethoscribe.errors import EthoscribeError
from ethoscribe.segment.registry import get_segmenter, segmenter_names

# Far above any camera (high-speed cameras record up to ~10^5 frames per second); a larger
# number is a slip (a time step, a frame count) and would make every window absurd.
MAX_FPS = 1_000_000

EXAMPLES = {
    "discover": """example:
  ethoscribe discover example_sessions --manifest example_sessions/manifest.csv --out results
  ethoscribe discover tracks/ --fps 30 --states 8 --out results   # no manifest, fixed count""",
    "label": """example:
  ethoscribe label results new_cohort/ --manifest new_cohort/manifest.csv --out new_results""",
    "compare": """example:
  ethoscribe compare results --out results/comparison --primary time_budget:digging
  ethoscribe compare results --by condition --paired --out results/by_condition""",
    "agreement": """example:
  ethoscribe agreement results coding.csv --out results/agreement""",
    "learn": """example:
  ethoscribe learn results coding.csv
  ethoscribe label results new_cohort/ --out new_results   # then: the expert's names""",
    "simulate": """example:
  ethoscribe simulate --out my_example --sessions 4 --duration 120""",
}


class _Examples(argparse.HelpFormatter):
    """Wraps the description as usual but keeps the epilog's example lines as written."""

    def _fill_text(self, text: str, width: int, indent: str) -> str:
        if text.startswith("example:"):
            return "".join(indent + line for line in text.splitlines(keepends=True))
        return super()._fill_text(text, width, indent)


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


def _positive(option: str) -> Any:
    def parse(value: str) -> float:
        try:
            number = float(value)
        except ValueError:
            number = float("nan")
        if not math.isfinite(number) or number <= 0:
            raise argparse.ArgumentTypeError(f"{option} takes a positive number; got {value!r}")
        return number

    return parse


def _non_negative(option: str) -> Any:
    def parse(value: str) -> float:
        try:
            number = float(value)
        except ValueError:
            number = float("nan")
        if not math.isfinite(number) or number < 0:
            raise argparse.ArgumentTypeError(f"{option} takes a number >= 0; got {value!r}")
        return number

    return parse


def _in_range(low: float, high: float, said: str) -> Callable[[str], float]:
    """An option's parser of a number from ``low`` to ``high``, refusing others with ``said``
    (``{value}``: what was given)."""

    def parse(value: str) -> float:
        try:
            number = float(value)
        except ValueError:
            number = float("nan")
        if not low <= number <= high:  # NaN too
            raise argparse.ArgumentTypeError(said.format(value=repr(value)))
        return number

    return parse


_min_confidence = _in_range(
    0.0, 1.0,
    "--min-confidence takes a number in [0, 1], e.g. 0.5; got {value} (confidences written "
    "in percent are read as fractions, so 50 % is 0.5; 0 masks no point)",
)  # fmt: skip
# a day at most: a simulated session is held in memory
_session_seconds = _in_range(
    1.0,
    86_400.0,
    "--duration takes the seconds of each session, from 1 to 86400 (a day); got {value}",
)


def _sessions_per_group(value: str) -> int:
    try:
        number = int(value)
    except ValueError:
        number = 0
    if number < 1:
        raise argparse.ArgumentTypeError(
            f"--sessions takes a whole number of sessions per group, at least 1; got {value!r}"
        )
    return number


def _confidence_scale(value: str) -> float | str:
    if value == "auto":
        return value
    number = _positive("--confidence-scale")(value)
    if number > 1:
        raise argparse.ArgumentTypeError(
            f"--confidence-scale takes 'auto' or a number in (0, 1]; got {value!r}"
        )
    return number


def _fps(value: str) -> float:
    number = _positive("--fps")(value)
    if number > MAX_FPS:
        raise argparse.ArgumentTypeError(
            f"--fps {value} is not a camera frame rate (at most {MAX_FPS:,} frames per second); "
            "give frames per second, e.g. --fps 30"
        )
    return number


def _pairs(value: str) -> tuple[tuple[str, str], ...] | str:
    text = value.strip()
    if text.lower() in ("auto", "none"):
        return "auto" if text.lower() == "auto" else ()
    pairs = []
    for item in text.split(","):
        parts = [p.strip() for p in item.split(":")]
        if len(parts) != 2 or not all(parts) or parts[0] == parts[1]:
            raise argparse.ArgumentTypeError(
                "--swap-pairs takes LEFT:RIGHT keypoint pairs separated by commas, e.g. "
                f"fore_l:fore_r,hind_l:hind_r (or 'auto' or 'none'); got {value!r}"
            )
        pairs.append((parts[0], parts[1]))
    return tuple(pairs)


def _max_speed(value: str) -> float | str | None:
    if value.strip().lower() in ("auto", "none"):
        return "auto" if value.strip().lower() == "auto" else None
    try:
        return _positive("--max-speed")(value)
    except argparse.ArgumentTypeError:
        raise argparse.ArgumentTypeError(
            f"--max-speed takes a speed in units per second, 'auto' or 'none'; got {value!r}"
        ) from None


def _mapping(option: str) -> Any:
    def parse(value: str) -> dict[str, str]:
        out = {}
        for item in value.split(","):
            key, sep, name = (t.strip() for t in item.partition("="))
            if not sep or not key or not name:
                raise argparse.ArgumentTypeError(
                    f"{option} takes ROLE=COLUMN pairs separated by commas, e.g. "
                    f"confidence=likelihood,x=nose_x; got {value!r}"
                )
            out[key] = name
        return out

    return parse


def _option(value: str) -> tuple[str, Any]:
    key, sep, text = value.partition("=")
    if not sep or not key.strip():
        raise argparse.ArgumentTypeError(
            f"--reader-option takes NAME=VALUE (e.g. units=mm); got {value!r}"
        )
    try:
        parsed: Any = json.loads(text)
    except ValueError:
        parsed = text
    return key.strip().replace("-", "_"), parsed


def _add_reading_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "inputs",
        nargs="*",
        type=Path,
        metavar="POSE_FILE_OR_FOLDER",
        help="pose files (tidy or wide CSV/Parquet tables, NWB) or folders of them",
    )
    p.add_argument(
        "--manifest", type=Path, help="session manifest CSV (session, path, fps, group, ...)"
    )
    p.add_argument(
        "--fps",
        type=_fps,
        help="frame rate (frames per second) for files whose manifest row gives none",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bars")
    r = p.add_argument_group("reading")
    r.add_argument(
        "--format",
        help="reader for every file: tidy (one row per frame and keypoint), wide (one row per "
        "frame), nwb, or a reader of an installed package (default: by file suffix)",
    )
    r.add_argument(
        "--pattern",
        help='wide tables: how columns are named, e.g. "{keypoint}_{axis}" or '
        '"{animal}.{keypoint}.{axis}"',
    )
    r.add_argument("--frame-column", help="wide tables: the column of frame numbers")
    r.add_argument("--time-column", help="wide tables: the column of times")
    r.add_argument(
        "--time-unit",
        choices=["s", "ms"],
        help="unit of the time column (checked against --fps; default: s)",
    )
    r.add_argument(
        "--columns",
        type=_mapping("--columns"),
        help="which column holds what: tidy tables name columns, e.g. "
        "confidence=likelihood,x=pos_x; wide tables the word after the keypoint, e.g. "
        "confidence=likelihood for 'nose_likelihood'",
    )
    r.add_argument(
        "--containers",
        help="NWB files: pose-estimation containers to read as animals, NAME,NAME or 'all' "
        "(default: all)",
    )
    r.add_argument(
        "--join-tracks",
        action="store_true",
        help="chain a tracker's track pieces (track0, track1 ...) into animals by continuity "
        "(the joins are listed in sessions.csv); default: each piece is an animal",
    )
    r.add_argument(
        "--reader-option",
        type=_option,
        action="append",
        default=[],
        metavar="NAME=VALUE",
        help="any other option of the reader (repeatable)",
    )


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ethoscribe",
        description="From keypoint tracks to a named ethogram. Outputs support, not replace, "
        "expert review and the local animal-welfare and ethics rules.",
        epilog="Run 'ethoscribe COMMAND --help' for a command's options and an example.",
    )
    parser.add_argument("--version", action="version", version=f"ethoscribe {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    d = sub.add_parser(
        "discover",
        help="clean, featurise and segment sessions into motifs",
        description="Read pose files, clean them, compute body-frame features and find the "
        "recurring motifs; write a workspace folder (tables, report, model).",
        epilog=EXAMPLES["discover"],
        formatter_class=_Examples,
    )
    _add_reading_options(d)
    d.add_argument(
        "--out",
        type=Path,
        required=True,
        help="output folder: new, empty or an earlier workspace (a folder of other files is "
        "refused)",
    )
    d.add_argument("--origin", help="keypoint at the body centre (default: centroid)")
    d.add_argument(
        "--axis", type=_axis, help="body axis as FROM,TO keypoints (tail side to head side)"
    )
    d.add_argument(
        "--up-axis",
        choices=("auto", "x", "y", "z"),
        default="auto",
        help="3-D tracks: the vertical axis (default auto: read from the tracks, z when they "
        "give no clear sign; motion capture often has y up)",
    )
    d.add_argument(
        "--up-direction",
        choices=("auto", "up", "down"),
        default="auto",
        help="3-D tracks: which way the vertical axis points (default auto: read from the "
        "floor; down for camera coordinates, which grow downwards); only the drawn postures "
        "depend on it",
    )
    d.add_argument(
        "--view",
        choices=("auto", "above", "side"),
        default="auto",
        help="2-D tracks: filmed from above (the body frame turns with the animal) or from the "
        "side (the body frame keeps height and pitch; the vertical image axis is read from "
        "the tracks, y unless the animals range clearly less along x); default auto: read from "
        "the tracks",
    )
    d.add_argument(
        "--no-social",
        action="store_true",
        help="no features of the nearest other animal (needed when single- and multi-animal "
        "sessions are fitted together)",
    )
    _add_cleaning_options(d)
    d.add_argument("--states", type=_states, default="auto", help="number of motifs, or 'auto'")
    d.add_argument(
        "--no-slow-regimes",
        action="store_true",
        help="keep the states as motifs even where they alternate in a mix that holds for "
        "minutes (by default such stretches are labelled by their mix; the report says so)",
    )
    d.add_argument(
        "--method",
        choices=segmenter_names(),
        default="hmm",
        help="; ".join(f"{n}: {get_segmenter(n).summary}" for n in segmenter_names()),
    )
    d.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    d.add_argument(
        "--replace-curation",
        action="store_true",
        help="allow a new discovery in a workspace whose motifs were already named (the old "
        "names are kept aside)",
    )
    _add_batch_options(d)
    d.add_argument(
        "--fit-frames",
        type=_fit_frames,
        default=1_000_000,
        help="fit on at most this many frames, in blocks from every session ('all': every "
        "frame; default 1000000)",
    )
    d.add_argument(
        "--no-stability-check",
        action="store_true",
        help="skip refitting under another seed and on two halves of the sessions (about two "
        "more fits; the report then grades no motif's reproducibility)",
    )
    d.add_argument(
        "--for-streaming",
        action="store_true",
        help="fit a model for closed-loop labelling: clean and compute features from past "
        "frames only and label with the forward filter, so offline labels match streamed ones",
    )

    lab = sub.add_parser(
        "label",
        help="label new sessions with a saved model (same motif names)",
        description="Label new sessions with the model and the curated motif names of a "
        "workspace; write a new workspace.",
        epilog=EXAMPLES["label"],
        formatter_class=_Examples,
    )
    lab.add_argument("model", type=Path, help="a workspace folder or its model/ folder")
    _add_reading_options(lab)
    lab.add_argument(
        "--out", type=Path, required=True, help="output folder: new, empty or an earlier workspace"
    )
    _add_batch_options(lab)

    c = sub.add_parser(
        "compare",
        help="group statistics and the HTML report of a discover folder",
        description="Compare groups of sessions (time budgets, bout rates and durations, "
        "transitions) and write the tables and report.html into a folder of their own.",
        epilog=EXAMPLES["compare"],
        formatter_class=_Examples,
    )
    c.add_argument("workspace", type=Path, help="folder written by 'ethoscribe discover'")
    c.add_argument(
        "--manifest", type=Path, help="CSV with a session column and the grouping column"
    )
    c.add_argument(
        "--out", type=Path, required=True, help="output folder: new, empty or an earlier comparison"
    )
    c.add_argument("--by", default="group", help="grouping column of the manifest (default: group)")
    c.add_argument(
        "--test",
        choices=["permutation", "rank"],
        default="permutation",
        help="permutation test of the difference in means (default) or a rank test",
    )
    c.add_argument(
        "--paired", action="store_true", help="paired design: subjects under each condition"
    )
    c.add_argument(
        "--primary",
        metavar="METRIC:MOTIF,...",
        help="the comparisons the study planned, tested as the confirmatory set with Holm's "
        "correction (curated motif names), e.g. --primary time_budget:digging,bout_rate:digging; "
        "every other test is exploratory (Benjamini-Hochberg within each family of metrics)",
    )
    c.add_argument(
        "--seed", type=int, default=0, help="random seed of the permutations (default 0)"
    )

    _add_expert_commands(sub)

    s = sub.add_parser(
        "simulate",
        help="write simulated example sessions (invented animals)",
        description="Write pose files of simulated sessions (an invented rodent, two groups) "
        "with a manifest and the true behaviour of every frame, to try ethoscribe on.",
        epilog=EXAMPLES["simulate"],
        formatter_class=_Examples,
    )
    s.add_argument(
        "--out", type=Path, required=True, help="folder for the pose files and manifest.csv"
    )
    s.add_argument(
        "--sessions", type=_sessions_per_group, default=8, help="sessions per group (default 8)"
    )
    s.add_argument(
        "--duration", type=_session_seconds, default=240.0, help="seconds per session (default 240)"
    )
    s.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    return parser


def _add_cleaning_options(p: argparse.ArgumentParser) -> None:
    c = p.add_argument_group("cleaning")
    c.add_argument(
        "--min-confidence",
        type=_min_confidence,
        help="mask points below this tracker confidence, in [0, 1] (default 0.5; confidences "
        "in percent are read as fractions, so 50 %% is 0.5; 0 masks no point)",
    )
    c.add_argument(
        "--confidence-scale",
        type=_confidence_scale,
        help="the tracker's full confidence: points are masked below --min-confidence times "
        "it; 1 keeps --min-confidence as given (default: 1, unless fewer than a tenth of a "
        "session's points reach 0.9; then their 90th percentile)",
    )
    c.add_argument(
        "--swap-pairs",
        type=_pairs,
        help="left/right keypoints the tracker may exchange, LEFT:RIGHT,LEFT:RIGHT (default: "
        "pairs read from the keypoint names, such as left_ear/right_ear or fore_l/fore_r)",
    )
    c.add_argument(
        "--no-auto-swap",
        action="store_true",
        help="do not pair keypoints by their names (repair only --swap-pairs, if given)",
    )
    c.add_argument(
        "--max-gap-s",
        type=_non_negative("--max-gap-s"),
        help="fill gaps of at most this many seconds (default 0.5; 0: none)",
    )
    c.add_argument(
        "--max-speed",
        type=_max_speed,
        default=argparse.SUPPRESS,
        help="speed bound of the jump test in units per second, 'auto' (default) or 'none'",
    )
    c.add_argument(
        "--smooth",
        choices=["savgol", "median", "none"],
        help="smoothing: savgol (default), median or none",
    )
    c.add_argument(
        "--smooth-window-s",
        type=_positive("--smooth-window-s"),
        help="smoothing window in seconds (default 0.2)",
    )
    c.add_argument(
        "--smooth-order",
        type=int,
        help="polynomial order of savgol smoothing (default 2)",
    )
    c.add_argument(
        "--px-per-unit",
        type=_positive("--px-per-unit"),
        help="calibration for pixel tracks: pixels per --unit (a manifest's px_per_unit "
        "column sets it per session instead)",
    )
    c.add_argument(
        "--unit", choices=["mm", "cm", "m"], help="physical unit of the output (default mm)"
    )
    c.add_argument(
        "--target-fps", type=_fps, help="resample every session to this frame rate at the end"
    )
    c.add_argument(
        "--keep-repeated-frames",
        action="store_true",
        help="keep frames that repeat the frame before exactly (default: short runs of them, "
        "repeated images of a video whose frame rate was raised, are filled from their "
        "neighbours)",
    )
    c.add_argument(
        "--keep-held-points",
        action="store_true",
        help="keep points that repeat their position on the frame before exactly (default: "
        "where coordinates have enough digits that an animal never repeats one, such a point "
        "was held where the tracker lost it, e.g. a track forward-filled, and counts as lost)",
    )
    c.add_argument(
        "--keep-interpolated-points",
        action="store_true",
        help="keep points on straight lines at an even pace, or on cubic curves, between seen "
        "points (default: "
        "where coordinates have enough digits, such points were filled in over the tracker's "
        "gaps, e.g. a track interpolated before export, and count as lost)",
    )
    c.add_argument(
        "--keep-track-identities",
        action="store_true",
        help="keep each track as the file numbers it (default: with several animals, a track "
        "that leaps to where another animal's track had just been is given that animal from "
        "then on: a tracker exchanging identities)",
    )
    c.add_argument(
        "--keep-placeholder-positions",
        action="store_true",
        help="keep points at a position held exactly on many frames, away from the body "
        "(default: such a position, e.g. 0, 0 written for lost points, counts as missing)",
    )


def _cleaning(args: argparse.Namespace) -> dict[str, Any]:
    """The cleaning fields given on the command line (others keep their defaults)."""
    given = {
        "min_confidence": args.min_confidence,
        "confidence_scale": args.confidence_scale,
        "max_gap_s": args.max_gap_s,
        "smooth_window_s": args.smooth_window_s,
        "smooth_order": args.smooth_order,
        "px_per_unit": args.px_per_unit,
        "unit": args.unit,
        "target_fps": args.target_fps,
    }
    out = {k: v for k, v in given.items() if v is not None}
    if hasattr(args, "max_speed"):  # given ("none" is None)
        out["max_speed"] = args.max_speed
    if args.smooth is not None:
        out["smooth"] = None if args.smooth == "none" else args.smooth
    if args.swap_pairs is not None:
        out["swap_pairs"] = args.swap_pairs
    elif args.no_auto_swap:
        out["swap_pairs"] = ()
    if args.keep_repeated_frames:
        out["fill_repeated"] = False
    if args.keep_held_points:
        out["mask_held"] = False
    if args.keep_interpolated_points:
        out["mask_interpolated"] = False
    if args.keep_placeholder_positions:
        out["placeholders"] = None
    if args.keep_track_identities:
        out["repair_identities"] = False
    return out


def _reader_options(args: argparse.Namespace) -> dict[str, Any]:
    """The reader options given on the command line."""
    given = {
        "pattern": args.pattern,
        "frame_column": args.frame_column,
        "time_column": args.time_column,
        "time_unit": args.time_unit,
        "columns": args.columns,
    }
    out = {k: v for k, v in given.items() if v is not None}
    if args.containers is not None:
        names = [n.strip() for n in args.containers.split(",") if n.strip()]
        out["pose_estimation"] = "all" if names == ["all"] else names
    out.update(dict(args.reader_option))
    return out


def _add_expert_commands(sub: argparse._SubParsersAction) -> None:
    a = sub.add_parser(
        "agreement",
        help="compare the motifs with an expert's coding",
        description="Measure how the discovered motifs match an expert's coding of some "
        "sessions (ARI, NMI, matched accuracy, boundary F1, confusion, per behaviour); write "
        "agreement.json, confusion.csv, per_behaviour.csv and report.html into --out.",
        epilog=EXAMPLES["agreement"],
        formatter_class=_Examples,
    )
    a.add_argument("workspace", type=Path, help="folder written by 'ethoscribe discover'")
    a.add_argument(
        "expert", type=Path, help="CSV/Parquet coding: session,frame,behaviour or "
        "session,behaviour,start_s,stop_s (or start_frame,stop_frame; stop not included)",
    )  # fmt: skip
    a.add_argument("--out", type=Path, required=True, help="output folder")
    a.add_argument(
        "--tolerance-s", type=float, default=0.2,
        help="how far apart boundaries may be and still match (seconds, default 0.2)",
    )  # fmt: skip
    le = sub.add_parser(
        "learn",
        help="learn an expert's behaviours from coded sessions",
        description="Fit a classifier of an expert's behaviours on the coded sessions (scored "
        "leave-one-session-out), save it in the workspace's learned/ folder and rewrite the "
        "ethogram tables with the expert's behaviour names; 'ethoscribe label' then uses them.",
        epilog=EXAMPLES["learn"],
        formatter_class=_Examples,
    )
    le.add_argument("workspace", type=Path, help="folder written by 'ethoscribe discover'")
    le.add_argument("expert", type=Path, help="CSV/Parquet coding (as for agreement)")
    le.add_argument(
        "--no-evaluation", action="store_true", help="skip the leave-one-session-out scores"
    )
    le.add_argument("--seed", type=int, default=0, help="random seed of the classifier (default 0)")


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
            up_axis=args.up_axis,
            up_direction=args.up_direction,
            view=args.view,
            slow_regimes=not args.no_slow_regimes,
            states=args.states,
            method=args.method,
            seed=args.seed,
            progress=progress,
            jobs=args.jobs,
            scheduler=args.scheduler,
            force=args.force,
            fit_frames=args.fit_frames,
            format=args.format,
            reader_options=_reader_options(args),
            join_tracks=args.join_tracks,
            cleaning=_cleaning(args),
            replace_curation=args.replace_curation,
            causal=args.for_streaming,
            stability=not args.no_stability_check,
            social=not args.no_social,
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
            format=args.format,
            reader_options=_reader_options(args),
            join_tracks=args.join_tracks,
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
            planned=args.primary,
        )
        return result
    if args.command in ("agreement", "learn"):
        from ethoscribe.workspace import expert

        if args.command == "agreement":
            result = expert.agreement(args.workspace, args.expert, args.out, args.tolerance_s)
            return expert.describe_agreement(result, args.out)
        learned = expert.learn(
            args.workspace, args.expert, evaluate=not args.no_evaluation, random_state=args.seed
        )
        return expert.describe_learning(learned, args.workspace)
    if args.command == "simulate":
        from ethoscribe.simulate import write_example_sessions

        write_example_sessions(
            args.out, n_per_group=args.sessions, duration_s=args.duration, seed=args.seed
        )
        return f"wrote simulated example sessions to {args.out}"
    raise AssertionError(args.command)


# Python argument names in library messages, and the command-line options that set them.
_OPTIONS = {
    "fps": "--fps", "jobs": "--jobs", "format": "--format", "pattern": "--pattern",
    "frame_column": "--frame-column", "time_column": "--time-column",
    "time_unit": "--time-unit", "columns": "--columns", "pose_estimation": "--containers",
    "min_confidence": "--min-confidence", "confidence_scale": "--confidence-scale",
    "max_gap_s": "--max-gap-s",
    "max_speed": "--max-speed", "swap_pairs": "--swap-pairs", "smooth": "--smooth",
    "smooth_window_s": "--smooth-window-s", "smooth_order": "--smooth-order",
    "px_per_unit": "--px-per-unit", "unit": "--unit", "target_fps": "--target-fps",
    "fit_frames": "--fit-frames", "states": "--states", "n_states": "--states",
    "seed": "--seed", "random_state": "--seed", "method": "--method", "origin": "--origin",
    "axis": "--axis", "replace_curation": "--replace-curation", "force": "--force",
    "causal": "--for-streaming", "social": "--no-social", "up_axis": "--up-axis", "view": "--view",
    "up_direction": "--up-direction",
    "slow_regimes": "--no-slow-regimes",
    "scheduler": "--scheduler", "manifest": "--manifest", "out": "--out",
}  # fmt: skip
_ASSIGNMENT = re.compile(r"\b(" + "|".join(_OPTIONS) + r")=(True|\.\.\.|[^\s,;)]+)?")
_BOTH = re.compile(r"pass ([^()]*?) \(command line: ([^)]*)\)")
_PAIR = re.compile(r"\b(axis)=\((\w+), (\w+)\)")
_NESTED = re.compile(r"\bcleaning=\{'(\w+)': ([^}]*)\}")
_COMPARED = re.compile(r"\b(" + "|".join(_OPTIONS) + r")(?= *(?:>=|<=|must|takes))")


def command_line_message(message: str) -> str:
    """A library message with Python argument names replaced by the command-line options
    (``fps=...`` -> ``--fps ...``, ``cleaning={'target_fps': ...}`` -> ``--target-fps ...``).

    Examples
    --------
    >>> command_line_message("pass fps=... (frames per second)")
    'pass --fps ... (frames per second)'
    """

    def flag(name: str, value: str | None) -> str:
        option = _OPTIONS.get(name, "--" + name.replace("_", "-"))
        value = None if value is None else value.strip("'\"")
        off = option.startswith("--no-") and value in ("False", "off")  # social=False, 'off'
        bare = value in (None, "", "True") or off
        return option if bare else f"{option} {value}"

    message = _BOTH.sub(r"pass \2", message)
    message = _PAIR.sub(lambda m: f"{_OPTIONS[m.group(1)]} {m.group(2)},{m.group(3)}", message)
    message = _NESTED.sub(lambda m: flag(m.group(1), m.group(2)), message)
    message = _ASSIGNMENT.sub(lambda m: flag(m.group(1), m.group(2)), message)
    return _COMPARED.sub(lambda m: _OPTIONS[m.group(1)], message)


def _parse(argv: Sequence[str] | None) -> argparse.Namespace:
    """The command line's arguments, the command's files given before or after its options
    (``ethoscribe label WS --out DIR FILES``): argparse reads a command's positional arguments
    in one run, so files after an option were refused as unrecognized."""
    parser = build_parser()
    tokens = list(sys.argv[1:] if argv is None else argv)
    args, extra = parser.parse_known_args(tokens)
    if not extra:
        return args
    commands = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    at = tokens.index(args.command)
    own = commands.choices[args.command].parse_intermixed_args(tokens[at + 1 :])
    own.command = args.command
    return own


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``ethoscribe`` command; returns the exit code."""
    args = _parse(argv)
    where = f"ethoscribe {args.command}"

    def show(message: Any, category: Any, *_: Any, **__: Any) -> None:
        text = command_line_message(str(message))
        # tqdm.write: on a line of its own, not after an open progress line
        tqdm.write(f"{where}: warning: {text}", file=sys.stderr)

    try:
        with warnings.catch_warnings():
            warnings.showwarning = show
            message = _run(args)
    except EthoscribeError as exc:
        print(f"{where}: error: {command_line_message(str(exc))}", file=sys.stderr)
        return 2
    except OSError as exc:  # a full disk, a read-only folder, --out naming a file ...
        what = exc.strerror or type(exc).__name__
        name = f" {exc.filename}" if exc.filename else ""
        print(f"{where}: error: cannot write or read{name}: {what}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"{where}: interrupted; finished outputs are kept", file=sys.stderr)
        return 130
    print(message)
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
