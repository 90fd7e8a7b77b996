"""``ddscreen validate``: every problem of the input files reported, nothing loaded."""

from __future__ import annotations

from dataclasses import dataclass, field

import polars as pl

from .. import config as cfgmod, pipeline
from ..errors import InputError
from ..ingest import REJECT_SCHEMA
from .inputs import expand


@dataclass
class Validation:
    problems: list[str]
    rows: dict[str, int]
    notices: list[str]
    suggestions: list[str] = field(default_factory=list)  # TOML column mappings to confirm, one per file

    @property
    def ok(self) -> bool:
        return not self.problems


def validate(
    buildings: str | None = None,
    readings: str | None = None,
    weather: str | None = None,
    *,
    config_path: str | None = None,
    overrides: dict | None = None,
    events: str | None = None,
) -> Validation:
    """Check the three kinds of file, and an events file when given; report every problem; load nothing.

    A kind not given here is taken from the config's ``[inputs]`` (a glob: every file it matches, each
    checked on its own; the checks across files, such as readings of unknown buildings, then run only
    when each kind is one file, and ``run`` makes them in any case). The events file, too, is the
    config's when not given.
    """
    cfg = cfgmod.settings(cfgmod.load(config_path, overrides))
    opts = pipeline.read_options(cfg)
    given = {"buildings": buildings, "readings": readings, "weather": weather}
    configured = cfg.inputs.by_kind()
    paths = {k: ([v] if v else expand(configured[k], k)) for k, v in given.items()}
    problems: list[str] = []
    notices: list[str] = []
    rows: dict[str, int] = {}
    loaded = {}
    suggestions: list[str] = []
    rejects: list[pl.DataFrame] = []
    for kind, kind_paths in paths.items():
        for path in kind_paths:
            try:
                ld = pipeline.read_file(kind, path, opts)
            except InputError as exc:
                problems.append(str(exc))
                if exc.problem == "missing required column":
                    suggestions.extend(_mapping_suggestion(kind, path, opts))
                continue
            if len(kind_paths) == 1:
                loaded[kind] = ld
            rows[kind] = rows.get(kind, 0) + ld.df.height
            notices.extend(ld.notices)
            rejects.append(ld.rejects.cast(REJECT_SCHEMA))
    if any(len(v) > 1 for v in paths.values()):
        notices.append(
            "several files of a kind: each was checked on its own; the checks across files "
            "(readings of unknown buildings, stations without weather) run with `ddscreen run`"
        )
    if len(loaded) == 3:
        buildings, readings = paths["buildings"][0], paths["readings"][0]
        from .. import units

        stations = sorted(loaded["weather"].df["station_id"].unique().to_list())
        b, r, rej = pipeline._cross_check(
            loaded["buildings"].df, loaded["readings"].df, stations, {"buildings": buildings, "readings": readings}
        )
        rejects.append(rej.cast(REJECT_SCHEMA))
        _, conv_rej = units.convert_to_kbtu(
            r,
            b,
            gas_btu_per_ft3=cfg.analysis.gas_btu_per_ft3,
            steam_btu_per_lb=cfg.analysis.steam_btu_per_lb,
        )
        rejects.append(
            conv_rej.select(
                pl.lit(readings).alias("file"), "line", "column", pl.col("value").cast(pl.String), "reason"
            ).cast(REJECT_SCHEMA)
        )
    events = events or cfg.inputs.events or None
    ev_paths = expand(events, "events") if events else []
    for path in ev_paths:  # issue 16/17: the events file, against the accepted buildings when they were read
        from .. import events as evmod

        try:
            ld = evmod.read_events(path, opts, loaded["buildings"].df["building_id"] if "buildings" in loaded else None)
        except InputError as exc:
            problems.append(str(exc))
            if exc.problem == "missing required column":
                suggestions.extend(_mapping_suggestion("events", path, opts))
            continue
        rows["events"] = rows.get("events", 0) + ld.df.height
        notices.extend(ld.notices)
        rejects.append(ld.rejects.cast(REJECT_SCHEMA))
    order = {str(p): i for i, p in enumerate([*(p for v in paths.values() for p in v), *ev_paths])}
    if rejects:
        allrej = (
            pl.concat(rejects)
            .with_columns(pl.col("file").replace_strict(order, default=9).alias("_k"))
            .sort("_k", "line", "column")
        )
        for r in allrej.iter_rows(named=True):
            problems.append(
                f"{r['file']}, line {r['line']}, column {r['column']!r}: {r['reason']}"
                + (f" (got {r['value']!r})" if r["value"] is not None else "")
            )
    return Validation(problems, rows, notices, suggestions)


def _mapping_suggestion(kind: str, path: str, opts) -> list[str]:
    """A ``[inputs.columns.KIND]`` block for a file that lacks required columns (or nothing to suggest)."""
    from .. import colmap
    from ..csvread import read_header

    try:
        header = read_header(path, delimiter=opts.delimiter, encoding=opts.encoding)
    except InputError:
        return []
    given = dict(opts.columns.get(kind) or {})
    norm_given = {k.strip().lower() for k in given}
    free = [h for h in header if h.strip().lower() not in norm_given]
    taken = set(given.values())
    pairs = [(t, o, "") for t, o in given.items()] + [
        (t, o, w) for t, o, w in colmap.suggest(free, kind) if o not in taken
    ]
    if len(pairs) == len(given):
        return []
    missing = colmap.missing_after(header, kind, {t: o for t, o, _ in pairs})
    block = colmap.toml_block(kind, pairs)
    if missing:
        block += "\n# still missing: " + ", ".join(missing) + " (add a line for each)"
    return [f"# {path}\n{block}"]
