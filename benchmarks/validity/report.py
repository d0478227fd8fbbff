"""The bench's Markdown table from its results JSON: ethoscribe beside the reference per source."""

from __future__ import annotations

import math

COLUMNS = [
    ("ARI", "ari", "{:.2f}"),
    ("NMI", "nmi", "{:.2f}"),
    ("matched acc.", "accuracy", "{:.2f}"),
    ("boundary F1 (0.2 s)", "boundary_f1", "{:.2f}"),
    ("unscored %", "unscored_pct", "{:.1f}"),
    ("states", "states_found", "{:d}"),
    ("seconds", "seconds", "{:.0f}"),
]


def _cell(result: dict | None, key: str, fmt: str) -> str:
    if not result or "error" in result:
        return "failed"
    value = result.get(key)
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return fmt.format(value)


def _mean(sources: dict, pipeline: str, key: str) -> float:
    values = [r[pipeline][key] for r in sources.values() if pipeline in r and key in r[pipeline]]
    return sum(values) / len(values) if values else float("nan")


def markdown(doc: dict) -> str:
    """One row per source; each cell "ethoscribe / reference"."""
    meta, sources = doc["meta"], doc["sources"]
    head = ["source", "kind", "frames", "fps", "true states"] + [c[0] for c in COLUMNS]
    lines = [
        f"Commit {meta['commit'][:10]}{' (modified)' if meta.get('dirty') else ''}, "
        f"{meta['date_utc']} UTC, seed {meta['seed']}; each cell: ethoscribe defaults / "
        "plain reference (given the true state count).",
        "",
        "| " + " | ".join(head) + " |",
        "|" + "|".join(["---"] * 2 + ["---:"] * (len(head) - 2)) + "|",
    ]
    for name, r in sources.items():
        if "error" in r:
            lines.append(f"| {name} | {r['error']} |" + " |" * (len(head) - 2))
            continue
        cells = [name, r["kind"], f"{r['frames']:,d}", str(r["fps"]), str(r["n_behaviours"])]
        for _, key, fmt in COLUMNS:
            cells.append(
                f"{_cell(r.get('ethoscribe'), key, fmt)} / {_cell(r.get('reference'), key, fmt)}"
            )
        lines.append("| " + " | ".join(cells) + " |")
    ok = {k: r for k, r in sources.items() if "error" not in r}
    e, ref = "ethoscribe", "reference"
    means = [
        f"mean over {len(ok)} sources (ethoscribe / reference): "
        f"ARI {_mean(ok, e, 'ari'):.2f} / {_mean(ok, ref, 'ari'):.2f}, "
        f"boundary F1 {_mean(ok, e, 'boundary_f1'):.2f} / {_mean(ok, ref, 'boundary_f1'):.2f}, "
        f"matched accuracy {_mean(ok, e, 'accuracy'):.2f} / {_mean(ok, ref, 'accuracy'):.2f}"
    ]
    failed = [
        f"{k} ({p}): {r[p]['error'].splitlines()[0][:200]}"
        for k, r in ok.items()
        for p in ("ethoscribe", "reference")
        if "error" in r.get(p, {})
    ]
    return "\n".join(lines + [""] + means + [f"failed: {f}" for f in failed])
