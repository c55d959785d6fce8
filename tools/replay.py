"""Replay recorded logs offline and write a browsable report.

Feeds every LOG (a recording log, or a drive folder of map images with a drive.toml)
through a fresh node, the same handlers the live node uses, as fast as the machine
allows (--realtime: at the recorded pace), and writes to --out: replans.csv and
summary.json (one row per replan), a picture per replan (map, path, robot, the cells
changed since the previous replan in cyan) and index.html with the table and a plot of
plan time and path length over the drive. Open index.html in any browser; it needs no
network.

--compare A.toml B.toml replays every log under both settings and reports per replan
and in total where they differ (found vs no_path, length, reverse, gear changes, plan
time as ratios), with pictures side by side for the largest differences. The exit code
is 1 when B is worse than A beyond the thresholds (--max-lost, --max-length-ratio,
--max-reverse-ratio, --max-gear-change-ratio, --max-plan-time-ratio), so it can gate CI.

--jobs N spreads the logs over N local processes; --cluster tcp://HOST:PORT over a Dask
cluster (pip install 'veer-planner[fleet]'; the workers read the logs by path). The
table is the same either way.

Time budgets (plan_deadline_s, max_time_s) are lifted so that a replay gives the same
answers on any machine; --deadlines applies them as the live node does.

Exit codes: 0 done (compare: B within the thresholds), 1 B worse than A, 2 bad input.
"""

from __future__ import annotations

import csv
import difflib
import html
import json
import math
import re
import sys
from dataclasses import asdict, dataclass, field
from pathlib import Path

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_NO_PATH, EXIT_OK, UsageError, number_flag

__all__ = [
    "CSV_COLUMNS",
    "PAIR_COLUMNS",
    "CompareThresholds",
    "LogOutcome",
    "ReplayOptions",
    "ReplayReport",
    "add_arguments",
    "compare_totals",
    "replay_logs",
    "replay_one",
    "replay_report",
    "run",
    "write_report",
]

CSV_COLUMNS = ("log", "config", "index", "t_s", "trigger", "map_id", "goal_id", "status", "reason", "length_m",
               "reverse_m", "gear_changes", "expansions", "plan_s", "picture")
"""Columns of replans.csv (and of each row of summary.json's ``replans``)."""

PAIR_COLUMNS = ("log", "pair", "t_s", "trigger", "change", "a_index", "b_index", "a_status", "b_status",
                "a_length_m", "b_length_m", "length_ratio", "a_reverse_m", "b_reverse_m", "a_gear_changes",
                "b_gear_changes", "a_plan_s", "b_plan_s", "plan_time_ratio", "score", "picture")
"""Columns of compare.csv: one row per pair of replans matched between A and B."""

FLEET_INSTALL = "pip install 'veer-planner[fleet]'"
_PICTURE_NAME = re.compile(r"(diff_)?\d{3}_\d{4}\.png")


@dataclass(frozen=True)
class CompareThresholds:
    """How much worse B may be than A before ``veer replay --compare`` exits 1 (docs/files.md, "Replay report")."""

    max_lost: int = 0
    max_length_ratio: float = 1.05
    max_reverse_ratio: float = 1.25
    max_gear_change_ratio: float = 1.25
    max_plan_time_ratio: float = 2.0


@dataclass(frozen=True)
class ReplayOptions:
    """How to replay: time budgets, pace, pictures, and where (local, processes, a Dask cluster)."""

    deadlines: bool = False
    realtime: bool = False
    pictures: bool = True
    top_differences: int = 6
    jobs: int = 1
    cluster: str | None = None
    progress: bool = False


@dataclass
class LogOutcome:
    """What replaying one source gave, as plain values (it travels back from worker processes).

    ``runs`` has one entry per configuration: ``{"rows", "damage", "inputs", "rejected",
    "checks_kept", "duration_s"}``; ``pairs`` the matched replans (compare only);
    ``pictures`` file name -> PNG bytes; ``error`` a one-line reason the source could not be read.
    """

    index: int
    source: str
    runs: list[dict] = field(default_factory=list)
    pairs: list[dict] = field(default_factory=list)
    pictures: dict = field(default_factory=dict)
    error: str | None = None


@dataclass
class ReplayReport:
    """What :func:`write_report` wrote: the folder, the files, totals, and the compare verdict."""

    out_dir: Path
    index_html: Path
    csv_path: Path
    json_path: Path
    replans: int
    pictures: int
    damage: list[str]
    compare: dict | None = None

    @property
    def worse(self) -> bool:
        return bool(self.compare and self.compare["failures"])


# ---------------------------------------------------------------------- the work of one log


def _short_name(source: str) -> str:
    path = Path(source)
    return path.name if path.name != "drive.toml" else path.parent.name


def _picture_of(run, replan, previous, title: str, label: str = ""):
    """The picture (BGR array) of one replan; ``previous`` the replan before it, for the changed cells."""
    from veer.tools.picture import plan_picture_image

    grid = replan.grid
    changed = None
    if previous is not None and previous.grid is not None:
        old = previous.grid
        if (old.classes.shape == grid.classes.shape and old.cell_size_m == grid.cell_size_m
                and tuple(old.origin_m) == tuple(grid.origin_m)):
            changed = old.classes != grid.classes
    notes = [f"{label}{_describe(replan.row())}",
             f"trigger {replan.trigger}, map_id {replan.map_id}, goal_id {replan.goal_id}"
             + (", starts ahead on the old path" if replan.starts_ahead else "")]
    if changed is not None:
        notes.append(f"{int(changed.sum())} cell(s) changed since the previous replan (cyan)")
    if replan.status != "found":
        notes.insert(0, f"no path ({replan.reason}): {replan.detail}")
    inflated = run.planner.inflated_grid(grid)
    return plan_picture_image(inflated, run.planner.vehicle, replan.start, replan.goal, replan.poses,
                              title=title, notes=notes, changed_cells=changed)


def _describe(row: dict) -> str:
    if row["status"] == "found":
        return (f"found {row['length_m']:.2f} m, reverse {row['reverse_m']:.2f} m, {row['gear_changes']} gear "
                f"change(s), {row['expansions']} expansions, {row['plan_s']:.3f} s")
    return f"no path ({row['reason']}), {row['expansions']} expansions, {row['plan_s']:.3f} s"


def _run_summary(run, log_name: str, label: str) -> dict:
    rows = []
    for replan in run.replans:
        row = {"log": log_name, "config": label, **replan.row(), "picture": ""}
        rows.append(row)
    return {"rows": rows, "damage": list(run.damage), "inputs": run.inputs, "rejected": run.rejected,
            "checks_kept": run.checks_kept, "duration_s": round(run.duration_s, 6)}


def _ratio(b: float, a: float) -> float | None:
    """b / a, 1 when both are 0, infinity when only a is 0 (JSON: null)."""
    if a == 0:
        return 1.0 if b == 0 else math.inf
    return b / a


def _match(rows_a: list[dict], rows_b: list[dict]) -> list[tuple[int | None, int | None]]:
    """Pairs of replan positions of A and B: aligned by (time, trigger) in order, leftovers alone."""
    keys_a = [(row["t_s"], row["trigger"]) for row in rows_a]
    keys_b = [(row["t_s"], row["trigger"]) for row in rows_b]
    pairs: list[tuple[int | None, int | None]] = []
    for op, a0, a1, b0, b1 in difflib.SequenceMatcher(None, keys_a, keys_b, autojunk=False).get_opcodes():
        if op == "equal":
            pairs.extend(zip(range(a0, a1), range(b0, b1)))
            continue
        common = min(a1 - a0, b1 - b0) if op == "replace" else 0
        pairs.extend(zip(range(a0, a0 + common), range(b0, b0 + common)))
        pairs.extend((i, None) for i in range(a0 + common, a1))
        pairs.extend((None, j) for j in range(b0 + common, b1))
    return pairs


def _pair_row(log_name: str, number: int, a: dict | None, b: dict | None) -> dict:
    row = {column: None for column in PAIR_COLUMNS}
    row.update(log=log_name, pair=number, picture="")
    first = a or b
    row["t_s"], row["trigger"] = first["t_s"], first["trigger"]
    for prefix, side in (("a", a), ("b", b)):
        if side is not None:
            row[f"{prefix}_index"] = side["index"]
            for key in ("status", "length_m", "reverse_m", "gear_changes", "plan_s"):
                row[f"{prefix}_{key}"] = side[key]
    if a is None or b is None:
        row["change"] = "only_a" if b is None else "only_b"
        row["score"] = 500.0
        return row
    found_a, found_b = a["status"] == "found", b["status"] == "found"
    row["plan_time_ratio"] = _ratio(b["plan_s"], a["plan_s"])
    if found_a and not found_b:
        row["change"], row["score"] = "lost", 1000.0
    elif found_b and not found_a:
        row["change"], row["score"] = "gained", 1000.0
    elif not found_a:
        row["change"], row["score"] = ("same" if a["reason"] == b["reason"] else "differs"), 0.0
    else:
        row["length_ratio"] = _ratio(b["length_m"], a["length_m"])
        score = (100.0 * abs(math.log(max(b["length_m"], 1e-9) / max(a["length_m"], 1e-9)))
                 + 10.0 * abs(b["gear_changes"] - a["gear_changes"]) + abs(b["reverse_m"] - a["reverse_m"]))
        row["score"] = round(score, 6)
        row["change"] = "same" if score < 1e-9 else "differs"
    return row


def replay_one(index: int, source: str, configs: list, options: ReplayOptions, labels: list[str],
               progress=None) -> LogOutcome:
    """Replay one source under each configuration; pictures rendered here (PNG bytes), so that a
    worker process or a Dask worker sends back plain values. Never raises for a bad source:
    the outcome's ``error`` says why."""
    from veer.node.offline import SourceError, replay
    from veer.tools.picture import encode_png, side_by_side

    name = _short_name(source)
    outcome = LogOutcome(index, source)
    stem = f"{index + 1:03d}"
    single = len(configs) == 1
    drawn: dict[int, str] = {}

    def draw(run, replan):
        """Single mode: draw each replan as it comes and let go of the grids before the last one."""
        previous = run.replans[-2] if len(run.replans) > 1 else None
        file = f"pictures/{stem}_{replan.index:04d}.png"
        title = f"{name}: replan {replan.index} at {replan.t_s:.2f} s ({replan.trigger})"
        outcome.pictures[file] = encode_png(_picture_of(run, replan, previous, title))
        drawn[replan.index] = file
        if previous is not None:
            previous.grid = previous.poses = None

    runs = []
    for label, config in zip(labels, configs):
        try:
            run = replay(source, config, deadlines=options.deadlines, realtime=options.realtime, progress=progress,
                         on_replan=draw if single and options.pictures else None)
        except SourceError as exc:
            outcome.error = str(exc)
            return outcome
        runs.append(run)
        outcome.runs.append(_run_summary(run, name, label))
    if single:
        for row in outcome.runs[0]["rows"]:
            row["picture"] = drawn.get(row["index"], "")
        return outcome
    rows_a, rows_b = outcome.runs[0]["rows"], outcome.runs[1]["rows"]
    for number, (i, j) in enumerate(_match(rows_a, rows_b), 1):
        outcome.pairs.append(_pair_row(name, number, None if i is None else rows_a[i],
                                       None if j is None else rows_b[j]))
    if options.pictures and options.top_differences > 0:
        candidates = [p for p in outcome.pairs if p["score"] > 0 and p["a_index"] and p["b_index"]]
        candidates.sort(key=lambda p: (-p["score"], p["pair"]))
        for pair in candidates[: options.top_differences]:
            images = []
            for side, run in (("a", runs[0]), ("b", runs[1])):
                k = pair[f"{side}_index"] - 1
                replan = run.replans[k]
                previous = run.replans[k - 1] if k > 0 else None
                label = labels[0 if side == "a" else 1]
                images.append(_picture_of(run, replan, previous,
                                          f"{label}, {name}: replan {replan.index} at {replan.t_s:.2f} s"))
            file = f"pictures/diff_{stem}_{pair['pair']:04d}.png"
            outcome.pictures[file] = encode_png(side_by_side(images))
            pair["picture"] = file
    return outcome


# ---------------------------------------------------------------------- spreading the work


def _check_sources(sources) -> list[str]:
    """Absolute paths of the sources; a one-line UsageError for one that cannot be read at all."""
    from veer.node.offline import SourceError, open_source

    checked = []
    for source in sources:
        path = Path(source)
        try:
            if path.is_dir() or path.suffix.lower() == ".toml":
                open_source(path, [])
            else:
                from veer.node.recording import LogFormatError, LogReader

                try:
                    LogReader(path)
                except LogFormatError as exc:
                    raise SourceError(str(exc)) from None
        except SourceError as exc:
            raise UsageError(str(exc)) from None
        checked.append(str(path.resolve()))
    return checked


class _Progress:
    """A tqdm bar on stderr when it is a terminal (and asked for); otherwise nothing."""

    def __init__(self, enabled: bool, total: int, unit: str):
        self.bar = None
        if enabled and sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(total=total, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True,
                            desc="veer replay")
        self.done = 0

    def to(self, value: int) -> None:
        if self.bar is not None and value > self.done:
            self.bar.update(value - self.done)
            self.done = value

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def _dask_client(address: str):
    try:
        from dask.distributed import Client
    except ImportError:
        raise UsageError(f"--cluster needs dask.distributed, which is not installed: {FLEET_INSTALL}") from None
    try:
        return Client(address, timeout=30, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise UsageError(f"cannot reach the Dask scheduler at {address} ({exc}); start one with "
                         "'dask scheduler' or check --cluster") from None


def replay_logs(sources, configs, options: ReplayOptions = ReplayOptions(),
                labels: list[str] | None = None) -> list[LogOutcome]:
    """Replay every source under every configuration (one for a report, two for a comparison).

    Runs here (``jobs`` 1), on ``jobs`` local processes, or on the Dask cluster at
    ``options.cluster``; the outcomes come back in the order of ``sources`` whichever way.
    Raises UsageError (one line) for a source that cannot be read or a cluster that
    cannot be reached.
    """
    from veer.node.config import NodeConfig

    configs = [configs] if isinstance(configs, NodeConfig) else list(configs)
    labels = labels or (["run"] if len(configs) == 1 else ["A", "B"])
    paths = _check_sources(sources)
    outcomes: list[LogOutcome | None] = [None] * len(paths)
    if options.cluster:
        client = _dask_client(options.cluster)
        try:
            from dask.distributed import as_completed

            futures = client.map(replay_one, range(len(paths)), paths, configs=configs, options=options,
                                 labels=labels, pure=False)
            bar = _Progress(options.progress, len(paths), "log")
            for done, future in enumerate(as_completed(futures, loop=client.loop), 1):
                outcome = future.result()
                outcomes[outcome.index] = outcome
                bar.to(done)
            bar.close()
        finally:
            client.close()
    elif options.jobs > 1 and len(paths) > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor, as_completed

        workers = min(options.jobs, len(paths))
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = [pool.submit(replay_one, i, path, configs, options, labels) for i, path in enumerate(paths)]
            bar = _Progress(options.progress, len(paths), "log")
            for done, future in enumerate(as_completed(futures), 1):
                outcome = future.result()
                outcomes[outcome.index] = outcome
                bar.to(done)
            bar.close()
    else:
        steps = 1000 * len(paths) * len(configs)
        bar = _Progress(options.progress, steps, "‰")
        for i, path in enumerate(paths):
            base = [1000 * len(configs) * i]

            def progress(done, total, base=base):
                bar.to(base[0] + (1000 * done // max(total, 1)))
                if done >= total:
                    base[0] += 1000

            outcomes[i] = replay_one(i, path, configs, options, labels, progress=progress)
        bar.close()
    return outcomes  # type: ignore[return-value]


# ---------------------------------------------------------------------- comparison


def compare_totals(outcomes: list[LogOutcome], thresholds: CompareThresholds) -> dict:
    """Totals of A and B over every matched pair, their ratios, and the thresholds B broke."""
    pairs = [pair for outcome in outcomes for pair in outcome.pairs]
    both = [p for p in pairs if p["a_status"] == "found" and p["b_status"] == "found"]
    matched = [p for p in pairs if p["a_index"] and p["b_index"]]
    rows_a = [row for outcome in outcomes if outcome.runs for row in outcome.runs[0]["rows"]]
    rows_b = [row for outcome in outcomes if len(outcome.runs) > 1 for row in outcome.runs[1]["rows"]]

    def total(key, side, chosen):
        return round(sum(p[f"{side}_{key}"] or 0 for p in chosen), 6)

    totals = {
        "replans_a": len(rows_a), "replans_b": len(rows_b),
        "found_a": sum(r["status"] == "found" for r in rows_a), "found_b": sum(r["status"] == "found" for r in rows_b),
        "matched": len(matched), "only_a": sum(p["change"] == "only_a" for p in pairs),
        "only_b": sum(p["change"] == "only_b" for p in pairs),
        "lost": sum(p["change"] == "lost" for p in pairs), "gained": sum(p["change"] == "gained" for p in pairs),
        "both_found": len(both),
        "length_m_a": total("length_m", "a", both), "length_m_b": total("length_m", "b", both),
        "reverse_m_a": total("reverse_m", "a", both), "reverse_m_b": total("reverse_m", "b", both),
        "gear_changes_a": int(total("gear_changes", "a", both)),
        "gear_changes_b": int(total("gear_changes", "b", both)),
        "plan_s_a": total("plan_s", "a", matched), "plan_s_b": total("plan_s", "b", matched),
    }
    ratios = {
        "length_ratio": _ratio(totals["length_m_b"], totals["length_m_a"]),
        "reverse_ratio": _ratio(totals["reverse_m_b"], totals["reverse_m_a"]),
        "gear_change_ratio": _ratio(totals["gear_changes_b"], totals["gear_changes_a"]),
        "plan_time_ratio": _ratio(totals["plan_s_b"], totals["plan_s_a"]),
    }
    checks = [
        ("lost", totals["lost"], thresholds.max_lost, "--max-lost",
         f"B found no path in {totals['lost']} replan(s) where A found one"),
        ("length_ratio", ratios["length_ratio"], thresholds.max_length_ratio, "--max-length-ratio",
         "total path length B / A"),
        ("reverse_ratio", ratios["reverse_ratio"], thresholds.max_reverse_ratio, "--max-reverse-ratio",
         "total reverse driving B / A"),
        ("gear_change_ratio", ratios["gear_change_ratio"], thresholds.max_gear_change_ratio,
         "--max-gear-change-ratio", "total gear changes B / A"),
        ("plan_time_ratio", ratios["plan_time_ratio"], thresholds.max_plan_time_ratio, "--max-plan-time-ratio",
         "total plan time B / A"),
    ]
    failures = []
    for key, value, limit, flag, what in checks:
        if value > limit:
            shown = "inf" if value == math.inf else (f"{value:.3f}" if isinstance(value, float) else str(value))
            failures.append(f"{what}: {shown} > {limit:g} ({flag})")
    return {"totals": totals, "ratios": ratios, "thresholds": asdict(thresholds), "failures": failures,
            "verdict": "worse" if failures else "ok"}


# ---------------------------------------------------------------------- the report


def _json_value(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return "inf" if value == math.inf else f"{value:.6g}"
    return str(value)


def _write_csv(path: Path, columns, rows) -> None:
    with open(path, "w", newline="", encoding="utf-8") as file:
        writer = csv.writer(file)
        writer.writerow(columns)
        for row in rows:
            writer.writerow([_cell(row.get(column)) for column in columns])


def _nice_step(span: float, count: int) -> float:
    raw = span / max(count, 1)
    power = 10 ** math.floor(math.log10(raw)) if raw > 0 else 1.0
    for factor in (1, 2, 2.5, 5, 10):
        if factor * power >= raw:
            return factor * power
    return 10 * power


def _svg_panel(series, y_label: str, x_range, width: int, height: int, top: int) -> list[str]:
    """One panel of the plot: axes, ticks, a line and dots per series (x, y points)."""
    left, right, bottom = 64, 16, 34
    x0, x1 = x_range
    ys = [y for _, _, points in series for _, y in points if y is not None and math.isfinite(y)]
    y1 = max(ys) if ys else 1.0
    step = _nice_step(y1 or 1.0, 4)
    y1 = step * math.ceil((y1 or 1.0) / step)
    plot_w, plot_h = width - left - right, height - bottom - 14

    def px(x, y):
        return (left + (x - x0) / (x1 - x0) * plot_w, top + 14 + plot_h - y / y1 * plot_h)

    out = [f'<text x="{left}" y="{top + 10}" class="axis-title">{html.escape(y_label)}</text>',
           f'<rect x="{left}" y="{top + 14}" width="{plot_w}" height="{plot_h}" class="frame"/>']
    value = 0.0
    while value <= y1 + 1e-9:
        _, yy = px(x0, value)
        out.append(f'<line x1="{left}" x2="{left + plot_w}" y1="{yy:.1f}" y2="{yy:.1f}" class="grid"/>')
        out.append(f'<text x="{left - 6}" y="{yy + 4:.1f}" class="tick" text-anchor="end">{value:g}</text>')
        value += step
    xstep = _nice_step(x1 - x0, 6)
    value = math.ceil(x0 / xstep) * xstep
    while value <= x1 + 1e-9:
        xx, _ = px(value, 0)
        out.append(f'<text x="{xx:.1f}" y="{top + 14 + plot_h + 16}" class="tick" '
                   f'text-anchor="middle">{value:g}</text>')
        value += xstep
    for name, colour, points in series:
        runs: list[list[tuple[float, float]]] = [[]]
        for x, y in points:  # a missing value (no path) breaks the line and is marked on the axis
            if y is None or not math.isfinite(y):
                runs.append([])
                a, b = px(x, 0.0)
                out.append(f'<text x="{a:.1f}" y="{b + 4:.1f}" class="miss" fill="{colour}" '
                           f'text-anchor="middle">&#215;<title>{html.escape(name)}: t {x:g} s, no path</title></text>')
            else:
                runs[-1].append((x, y))
        for run in runs:
            if len(run) > 1:
                line = " ".join(f"{a:.1f},{b:.1f}" for a, b in (px(x, y) for x, y in run))
                out.append(f'<polyline points="{line}" fill="none" stroke="{colour}" stroke-width="1.5"/>')
            for x, y in run:
                a, b = px(x, y)
                out.append(f'<circle cx="{a:.1f}" cy="{b:.1f}" r="3" fill="{colour}"><title>{html.escape(name)}: '
                           f't {x:g} s, {y:g}</title></circle>')
    return out


def _svg_plot(series_time, series_length, width: int = 760) -> str:
    """Plan time and path length over the drive: two stacked panels, inline SVG, no script."""
    xs = [x for _, _, points in series_time + series_length for x, _ in points]
    x0, x1 = (min(xs), max(xs)) if xs else (0.0, 1.0)
    if x1 - x0 < 1e-9:
        x0, x1 = x0 - 0.5, x1 + 0.5
    panel_h = 150
    height = 2 * panel_h + 40
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" role="img" aria-label="plan time and path length over the drive">']
    parts += _svg_panel(series_time, "plan time (s)", (x0, x1), width, panel_h, 0)
    parts += _svg_panel(series_length, "path length (m); \u00d7 no path", (x0, x1), width, panel_h, panel_h)
    parts.append(f'<text x="{width // 2}" y="{height - 6}" class="axis-title" text-anchor="middle">'
                 f'time since the start of the log (s)</text>')
    x = 64
    for name, colour, _ in series_time:
        parts.append(f'<rect x="{x}" y="{height - 18}" width="12" height="4" fill="{colour}"/>'
                     f'<text x="{x + 16}" y="{height - 13}" class="tick">{html.escape(name)}</text>')
        x += 24 + 8 * len(name)
    parts.append("</svg>")
    return "\n".join(parts)


_CSS = """
body { font-family: system-ui, sans-serif; margin: 1.5em; color: #222; max-width: 1400px; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.6em; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.6em 0; }
th, td { border: 1px solid #ccc; padding: 2px 6px; text-align: right; }
th { background: #eee; } td.text { text-align: left; }
tr.no_path td, tr.lost td { background: #fde8e8; } tr.gained td { background: #e6f5e6; }
.verdict-ok { color: #165c16; } .verdict-worse { color: #a11; }
.damage { color: #a11; } figure { margin: 1em 0; } figure img { max-width: 100%; border: 1px solid #bbb; }
figcaption { font-size: 0.9em; color: #444; }
svg .frame { fill: #fafafa; stroke: #999; } svg .grid { stroke: #e2e2e2; }
svg .tick { font-size: 11px; fill: #444; } svg .miss { font-size: 16px; font-weight: bold; }
.wide { overflow-x: auto; } svg .axis-title { font-size: 12px; fill: #222; }
"""

# Marks every picture as loaded or not once the page has loaded: a check a person (or a
# headless browser) can read back from the DOM. Our own five lines, no library.
_SCRIPT = """
window.addEventListener("load", function () {
  var images = document.images, loaded = 0;
  for (var i = 0; i < images.length; i++) {
    var ok = images[i].complete && images[i].naturalWidth > 0;
    images[i].setAttribute("data-loaded", ok ? "yes" : "no");
    if (ok) { loaded++; }
  }
  document.body.setAttribute("data-images-loaded", loaded + "/" + images.length);
});
"""

_COLOURS = ("#1f5fbf", "#c0392b")


def _table(columns, rows, table_id: str, text_columns=("log", "config", "trigger", "status", "reason", "change",
                                                        "a_status", "b_status")) -> str:
    head = "".join(f"<th>{html.escape(c)}</th>" for c in columns)
    body = []
    for row in rows:
        css = row.get("status") or row.get("change") or ""
        cells = []
        for column in columns:
            value = row.get(column)
            if column == "picture" and value:
                text = f'<a href="{html.escape(value)}">{html.escape(Path(value).name)}</a>'
            else:
                text = html.escape(_cell(value))
            cells.append(f'<td class="text">{text}</td>' if column in text_columns or column == "picture"
                         else f"<td>{text}</td>")
        body.append(f'<tr class="{html.escape(str(css))}">{"".join(cells)}</tr>')
    return (f'<table id="{table_id}"><thead><tr>{head}</tr></thead>\n<tbody>\n' + "\n".join(body)
            + "\n</tbody></table>")


def _series(rows, name, colour, key):
    points = []
    for row in rows:
        points.append((row["t_s"], row[key]))
    return (name, colour, points)


_MAX_PLOTS = 50


def write_report(out_dir, outcomes: list[LogOutcome], labels: list[str],
                 thresholds: CompareThresholds | None = None, *, title: str = "veer replay report",
                 notes: list[str] | None = None, top_differences: int = ReplayOptions().top_differences
                 ) -> ReplayReport:
    """Write replans.csv, summary.json, the pictures and index.html (compare: also compare.csv).

    ``labels`` names the configurations (one, or A and B); ``thresholds`` is given for a
    comparison, whose ``top_differences`` largest differences keep their pictures. Layout and columns: docs/files.md, "Replay report".
    """
    out = Path(out_dir)
    try:
        (out / "pictures").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"cannot create report folder {out}: {exc.strerror or exc}; choose another --out") from None
    comparing = len(labels) > 1
    rows = [row for outcome in outcomes for run in outcome.runs for row in run["rows"]]
    damage = []
    for outcome in outcomes:
        name = _short_name(outcome.source)
        if outcome.error:
            damage.append(f"{name}: not replayed: {outcome.error}")
        if outcome.runs:
            damage.extend(f"{name}: damage: {line}" for line in outcome.runs[0]["damage"])
    compare = None
    pairs = [pair for outcome in outcomes for pair in outcome.pairs]
    shown_pairs: list[dict] = []
    if comparing:
        compare = compare_totals(outcomes, thresholds or CompareThresholds())
        pictured = sorted((p for p in pairs if p["picture"]), key=lambda p: (-p["score"], p["log"], p["pair"]))
        shown_pairs = pictured[:top_differences]
        kept = {p["picture"] for p in shown_pairs}
        for pair in pairs:  # pictures of pairs below the global top are not part of the report
            if pair["picture"] not in kept:
                pair["picture"] = ""
        _write_csv(out / "compare.csv", PAIR_COLUMNS, pairs)
    else:
        kept = {row["picture"] for row in rows if row["picture"]}
    for stale in out.glob("pictures/*.png"):  # of an earlier report in the same folder
        if _PICTURE_NAME.fullmatch(stale.name):
            stale.unlink()
    for outcome in outcomes:
        for file, data in outcome.pictures.items():
            if file in kept:
                (out / file).write_bytes(data)
    csv_path, json_path = out / "replans.csv", out / "summary.json"
    _write_csv(csv_path, CSV_COLUMNS, rows)
    logs = []
    for outcome in outcomes:
        entry = {"source": outcome.source, "error": outcome.error, "runs": []}
        for label, run in zip(labels, outcome.runs):
            entry["runs"].append({"config": label, "replans": len(run["rows"]),
                                  **{k: run[k] for k in ("inputs", "rejected", "checks_kept", "duration_s", "damage")}})
        logs.append(entry)
    summary = {
        "format": "veer-replay-1",
        "mode": "compare" if comparing else "replay",
        "configs": labels,
        "notes": notes or [],
        "totals": {"logs": len(outcomes), "replans": len(rows),
                   "found": sum(r["status"] == "found" for r in rows),
                   "no_path": sum(r["status"] != "found" for r in rows),
                   "damage": len(damage)},
        "logs": logs,
        "replans": [{c: _json_value(r.get(c)) for c in CSV_COLUMNS} for r in rows],
    }
    if compare is not None:
        summary["compare"] = {**compare, "ratios": {k: _json_value(v) for k, v in compare["ratios"].items()},
                              "pairs": [{c: _json_value(p.get(c)) for c in PAIR_COLUMNS} for p in pairs]}
    json_path.write_text(json.dumps(summary, indent=1) + "\n", encoding="utf-8")
    index = out / "index.html"
    index.write_text(_html(title, outcomes, labels, rows, damage, notes or [], compare, pairs, shown_pairs),
                     encoding="utf-8")
    return ReplayReport(out, index, csv_path, json_path, len(rows), len(kept), damage, compare)


def _outcome(pair: dict, side: str) -> str:
    status = pair[f"{side}_status"]
    if status == "found":
        return (f"found {pair[side + '_length_m']:.2f} m, reverse {pair[side + '_reverse_m']:.2f} m, "
                f"{pair[side + '_gear_changes']} gear change(s)")
    return "no path" if status else "no matching replan"


def _html(title, outcomes, labels, rows, damage, notes, compare, pairs, shown_pairs) -> str:
    esc = html.escape
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{esc(title)}</title><style>{_CSS}</style><script>{_SCRIPT}</script></head><body>",
             f"<h1>{esc(title)}</h1>"]
    found = sum(r["status"] == "found" for r in rows)
    parts.append(f"<p>{len(outcomes)} log(s), {len(rows)} replan(s): {found} found, {len(rows) - found} no path. "
                 f"Configurations: {esc(', '.join(labels))}.</p>")
    for note in notes:
        parts.append(f"<p>{esc(note)}</p>")
    if damage:
        parts.append('<h2>Damage and unreadable logs</h2><ul class="damage">'
                     + "".join(f"<li>{esc(line)}</li>" for line in damage) + "</ul>")
    if compare is not None:
        verdict = compare["verdict"]
        parts.append(f'<h2 class="verdict-{verdict}">Verdict: B is '
                     f'{"worse than A beyond the thresholds" if compare["failures"] else "within the thresholds"}'
                     "</h2>")
        if compare["failures"]:
            parts.append("<ul>" + "".join(f"<li>{esc(f)}</li>" for f in compare["failures"]) + "</ul>")
        t, r, th = compare["totals"], compare["ratios"], compare["thresholds"]
        total_rows = [
            {"what": "replans", "A": t["replans_a"], "B": t["replans_b"]},
            {"what": "found", "A": t["found_a"], "B": t["found_b"]},
            {"what": "lost (A found, B not)", "B": t["lost"], "limit": th["max_lost"]},
            {"what": "gained (B found, A not)", "B": t["gained"]},
            {"what": "unmatched replans", "A": t["only_a"], "B": t["only_b"]},
            {"what": "length (m), both found", "A": t["length_m_a"], "B": t["length_m_b"],
             "B / A": r["length_ratio"], "limit": th["max_length_ratio"]},
            {"what": "reverse (m), both found", "A": t["reverse_m_a"], "B": t["reverse_m_b"],
             "B / A": r["reverse_ratio"], "limit": th["max_reverse_ratio"]},
            {"what": "gear changes, both found", "A": t["gear_changes_a"], "B": t["gear_changes_b"],
             "B / A": r["gear_change_ratio"], "limit": th["max_gear_change_ratio"]},
            {"what": "plan time (s), matched", "A": t["plan_s_a"], "B": t["plan_s_b"],
             "B / A": r["plan_time_ratio"], "limit": th["max_plan_time_ratio"]},
        ]
        parts.append(_table(("what", "A", "B", "B / A", "limit"), total_rows, "totals", text_columns=("what",)))
    for outcome in outcomes[:_MAX_PLOTS]:
        if not outcome.runs:
            continue
        name = _short_name(outcome.source)
        runs = outcome.runs
        parts.append(f"<h2>{esc(name)}</h2>")
        parts.append(f"<p>{esc(outcome.source)}: " + "; ".join(
            f"{esc(label)}: {len(run['rows'])} replan(s), {run['checks_kept']} path(s) kept on a new grid, "
            f"{run['inputs']} input(s), {run['rejected']} rejected, {run['duration_s']:.1f} s of log"
            for label, run in zip(labels, runs)) + "</p>")
        series_t = [_series(run["rows"], label, _COLOURS[k], "plan_s") for k, (label, run) in
                    enumerate(zip(labels, runs))]
        series_l = [_series(run["rows"], label, _COLOURS[k], "length_m") for k, (label, run) in
                    enumerate(zip(labels, runs))]
        parts.append(f'<div class="plot">{_svg_plot(series_t, series_l)}</div>')
    if len(outcomes) > _MAX_PLOTS:
        parts.append(f"<p>Plots of the first {_MAX_PLOTS} logs only; every replan is in the tables.</p>")
    if compare is not None:
        parts.append("<h2>Largest differences</h2>")
        if not shown_pairs:
            parts.append("<p>No replan differs between A and B.</p>")
        for pair in shown_pairs:
            parts.append(f'<figure><img src="{esc(pair["picture"])}" alt="A and B side by side, {esc(pair["log"])} '
                         f'pair {pair["pair"]}"><figcaption>{esc(pair["log"])}, pair {pair["pair"]} at '
                         f'{pair["t_s"]:.2f} s ({esc(str(pair["trigger"]))}): {esc(pair["change"])}; A '
                         f'{esc(_outcome(pair, "a"))}, B {esc(_outcome(pair, "b"))}</figcaption></figure>')
        parts.append("<h2>Replans matched between A and B</h2>")
        parts.append(f'<div class="wide">{_table(PAIR_COLUMNS, pairs, "pairs")}</div>')
    parts.append("<h2>Every replan</h2>")
    parts.append(f'<div class="wide">{_table(CSV_COLUMNS, rows, "replans")}</div>')
    if compare is None:
        pictured = [row for row in rows if row["picture"]]
        if pictured:
            parts.append("<h2>Pictures, in order</h2>")
        for row in pictured:
            parts.append(f'<figure id="{esc(Path(row["picture"]).stem)}"><img src="{esc(row["picture"])}" '
                         f'alt="replan {row["index"]} of {esc(row["log"])}"><figcaption>{esc(row["log"])}, replan '
                         f'{row["index"]} at {row["t_s"]:.2f} s, trigger {esc(row["trigger"])}: '
                         f'{esc(_describe(row))}</figcaption></figure>')
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def replay_report(logs, out_dir, config=None, *, label: str = "defaults",
                  options: ReplayOptions = ReplayOptions()) -> ReplayReport:
    """Replay ``logs`` (paths of logs or drive folders) under ``config`` (a NodeConfig; None:
    the defaults) and write the report to ``out_dir``: ``veer replay LOG... --out DIR`` as a call.

    Raises UsageError (one line) for a log that cannot be read; damage inside a log is in
    ``report.damage``.
    """
    from veer.node.config import NodeConfig

    outcomes = replay_logs(list(logs), config or NodeConfig(), options, [label])
    return write_report(out_dir, outcomes, [label])


# ---------------------------------------------------------------------- command line


_RATIO = number_flag("a number (inf switches the check off)", low=0.0, allow_inf=True)


def _positive_int(text: str) -> int:
    import argparse

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be 1 or more, got {value}")
    return value


def add_arguments(parser) -> None:
    """Add the ``veer replay`` arguments to an argparse parser."""
    defaults = CompareThresholds()
    parser.add_argument("logs", nargs="+", metavar="LOG", help="recording log, or drive folder (with drive.toml)")
    parser.add_argument("--config", metavar="NODE.toml", help="node settings to replay with (default: the defaults)")
    parser.add_argument("--out", metavar="REPORT_DIR", default="veer-replay",
                        help="report folder (created; default ./veer-replay)")
    parser.add_argument("--realtime", action="store_true", help="feed inputs at their recorded pace")
    parser.add_argument("--deadlines", action="store_true",
                        help="apply plan_deadline_s and max_time_s as the live node does (answers then depend "
                             "on the machine's speed)")
    parser.add_argument("--compare", nargs=2, metavar=("A.toml", "B.toml"),
                        help="replay under both settings and report where B differs from A")
    parser.add_argument("--jobs", type=_positive_int, default=1, metavar="N", help="local processes (default 1)")
    parser.add_argument("--cluster", metavar="tcp://HOST:PORT",
                        help=f"replay on this Dask scheduler's workers ({FLEET_INSTALL})")
    parser.add_argument("--no-pictures", dest="pictures", action="store_false", help="write tables and plots only")
    parser.add_argument("--top", type=int, default=ReplayOptions().top_differences, metavar="K",
                        help="compare: side-by-side pictures of the K largest differences (default %(default)s)")
    parser.add_argument("--max-lost", type=int, default=defaults.max_lost, metavar="N",
                        help="compare: replans where A found a path and B none, allowed (default %(default)s)")
    parser.add_argument("--max-length-ratio", type=_RATIO, default=defaults.max_length_ratio, metavar="R",
                        help="compare: total length B / A over replans both found (default %(default)s)")
    parser.add_argument("--max-reverse-ratio", type=_RATIO, default=defaults.max_reverse_ratio, metavar="R",
                        help="compare: total reverse metres B / A (default %(default)s)")
    parser.add_argument("--max-gear-change-ratio", type=_RATIO, default=defaults.max_gear_change_ratio,
                        metavar="R", help="compare: total gear changes B / A (default %(default)s)")
    parser.add_argument("--max-plan-time-ratio", type=_RATIO, default=defaults.max_plan_time_ratio, metavar="R",
                        help="compare: total plan time B / A; depends on the machine (default %(default)s; "
                             "inf: off)")


def _load(path: str | None):
    from veer.node.config import ConfigError, load_config

    try:
        return load_config(path)
    except ConfigError as exc:
        raise UsageError(str(exc)) from None


def run(args) -> int:
    """Carry out ``veer replay``; returns the exit code (see the module docstring)."""
    if args.compare and args.config:
        raise UsageError("give either --config or --compare A.toml B.toml, not both")
    if args.cluster and args.jobs > 1:
        raise UsageError("give either --jobs N (local processes) or --cluster ADDRESS (Dask), not both")
    if args.top < 0 or args.max_lost < 0:
        raise UsageError("--top and --max-lost must be 0 or more")
    if args.compare:
        configs = [_load(args.compare[0]), _load(args.compare[1])]
        labels = [f"A ({Path(args.compare[0]).name})", f"B ({Path(args.compare[1]).name})"]
    else:
        configs = [_load(args.config)]
        labels = [Path(args.config).name if args.config else "defaults"]
    options = ReplayOptions(deadlines=args.deadlines, realtime=args.realtime, pictures=args.pictures,
                            top_differences=args.top, jobs=args.jobs, cluster=args.cluster, progress=True)
    outcomes = replay_logs(args.logs, configs, options, labels)
    thresholds = CompareThresholds(args.max_lost, args.max_length_ratio, args.max_reverse_ratio,
                                   args.max_gear_change_ratio, args.max_plan_time_ratio)
    notes = [] if args.deadlines else ["Time budgets lifted (plan_deadline_s, max_time_s): the answers do not "
                                       "depend on the machine; plan_s does."]
    report = write_report(args.out, outcomes, labels, thresholds if args.compare else None, notes=notes,
                          top_differences=args.top)
    for line in report.damage:
        print(f"veer replay: {line}", file=sys.stderr)
    for outcome in outcomes:
        name = _short_name(outcome.source)
        for label, run_ in zip(labels, outcome.runs):
            found = sum(r["status"] == "found" for r in run_["rows"])
            print(f"{name} [{label}]: {len(run_['rows'])} replan(s), {found} found, "
                  f"{len(run_['rows']) - found} no path, {run_['checks_kept']} kept")
    if report.compare is not None:
        t = report.compare["totals"]
        if report.worse:
            print(f"B is worse than A: {'; '.join(report.compare['failures'])}")
        else:
            print(f"B is within the thresholds of A ({t['matched']} matched replan(s), {t['lost']} lost, "
                  f"{t['gained']} gained)")
    print(f"report: {report.index_html}")
    if any(outcome.error for outcome in outcomes):
        return EXIT_BAD_INPUT
    return EXIT_NO_PATH if report.worse else EXIT_OK
