"""The ``ddscreen`` command line: parse options, call one library function, map errors to exit codes.

Exit codes: 0 ok · 1 run failed · 2 bad input or configuration · 3 another run holds the lock ·
130 stopped by SIGINT (Ctrl-C) · 143 stopped by SIGTERM (``errors.Interrupted``; the handlers are
``screening/interrupts.py``: one ``ddscreen: error: interrupted by …`` line, a second signal during
the clean-up is ignored).
Data issues in some buildings do not change the exit code (they are results, listed in the outputs).
"""

from __future__ import annotations

import datetime as _dt
import logging
import os
import sys
import tempfile
import traceback
from collections.abc import Iterator
from contextlib import contextmanager
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

from . import __version__, choices, interrupts
from .errors import EXIT_BAD_INPUT, EXIT_RUN_FAILED, Interrupted, ScreeningError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Screen a portfolio of buildings for excess heating use (degree-day method).",
)
log = logging.getLogger("ddscreen")


def _version(value: bool):
    if value:
        typer.echo(f"ddscreen {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[
        Optional[bool], typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = None,
):
    """Screen a portfolio of buildings for excess heating use (degree-day method)."""


class _StderrHandler(logging.StreamHandler):
    """The console handler :func:`_log_to_stderr` installs (and replaces on its next call)."""


def _log_to_stderr(quiet: bool, verbose: bool) -> None:
    level = logging.ERROR if quiet else (logging.DEBUG if verbose else logging.INFO)
    log.setLevel(logging.DEBUG)
    for old in list(log.handlers):
        if isinstance(old, _StderrHandler):
            log.removeHandler(old)
    h = _StderrHandler(sys.stderr)
    h.setLevel(level)
    h.setFormatter(logging.Formatter("ddscreen: %(message)s"))
    log.addHandler(h)


_reported: list[BaseException] = []  # what _fail has printed (main() prints a stop signal once)


def _fail(exc: BaseException) -> None:
    """Map an exception to one line on stderr and an exit code (no traceback for users)."""
    if isinstance(exc, MemoryError):
        from .memory import ran_out

        exc = ran_out(exc, None)
    exc = interrupts.as_interrupted(exc)  # Ctrl-C, SIGTERM, or an error a library raised because of them
    _reported.append(exc)
    if isinstance(exc, (ScreeningError, Interrupted)):
        typer.echo(f"ddscreen: error: {exc}", err=True)
        raise typer.Exit(exc.exit_code)
    path = (
        Path(tempfile.gettempdir()) / f"ddscreen-crash-{_dt.datetime.now().strftime('%Y%m%dT%H%M%S')}-{os.getpid()}.log"
    )
    try:
        path.write_text("".join(traceback.format_exception(exc)), encoding="utf-8")
        where = f"; details in {path}"
    except OSError:
        where = ""
    typer.echo(f"ddscreen: internal error: {type(exc).__name__}: {str(exc)[:200]}{where}", err=True)
    raise typer.Exit(EXIT_RUN_FAILED)


#: typer's own exits and usage errors (typer vendors click in recent releases, so click is not imported:
#: it is not a dependency of ours)
_TYPER_OWN: tuple[type[BaseException], ...] = (
    typer.Exit,
    typer.Abort,
    next(c for c in typer.BadParameter.__mro__ if c.__name__ == "ClickException"),
)


@contextmanager
def _mapped_errors(*, value_error_is_bad_input: bool = False) -> Iterator[None]:
    """Every command's library call runs inside this: the one place where an exception becomes one line on
    stderr and an exit code (:func:`_fail`). typer's own exits and usage errors pass through unchanged;
    with ``value_error_is_bad_input`` a ``ValueError`` (a bad argument of a library function) is one
    ``ddscreen: error:`` line and exit 2."""
    try:
        yield
    except _TYPER_OWN:
        raise
    except ValueError as exc:
        if not value_error_is_bad_input:
            _fail(exc)
        typer.echo(f"ddscreen: error: {exc}", err=True)
        raise typer.Exit(EXIT_BAD_INPUT) from None
    except (Exception, KeyboardInterrupt) as exc:  # noqa: BLE001 - mapped to exit codes
        _fail(exc)


class OutputFormat(str, Enum):
    """``degree-days --format``."""

    csv = "csv"
    table = "table"


def _either(values: tuple[str, ...]) -> str:
    """An option's choices for its help text: "a, b or c"."""
    return ", ".join(values[:-1]) + " or " + values[-1] if len(values) > 1 else "".join(values)


def _members(values: tuple[str, ...]) -> dict[str, str]:
    """An option's choices as enum members: the name is the value with ``-`` as ``_``."""
    return {v.replace("-", "_"): v for v in values}


# The fixed choices of the options, each declared once in screening/choices.py (no imports: the CLI starts
# without polars); tests/test_cli.py compares each enum with the library's tuple. mypy cannot list the
# members of an enum built from a tuple (hence the ignores), so a default is a member taken by value.
#: ``degree-days --kind``
DegreeDayKind = Enum("DegreeDayKind", _members(choices.DEGREE_DAY_KINDS), type=str)  # type: ignore[misc]
#: ``--units`` (any case)
Units = Enum("Units", _members(choices.UNIT_SYSTEMS), type=str)  # type: ignore[misc]
#: ``--date-order``: ``[reading] date_order`` but "" (detect), which is the option left out
DateOrder = Enum("DateOrder", _members(choices.DATE_ORDERS), type=str)  # type: ignore[misc]
#: ``degree-days --method``
DegreeDayMethod = Enum("DegreeDayMethod", _members(choices.DEGREE_DAY_METHODS), type=str)  # type: ignore[misc]
#: ``degree-days --by``
PeriodBy = Enum("PeriodBy", _members(choices.PERIODS_BY), type=str)  # type: ignore[misc]
#: the degree-days command's defaults (members by value: a value not in the library's tuple fails at import)
DEFAULT_KIND, DEFAULT_METHOD, DEFAULT_BY = DegreeDayKind("both"), DegreeDayMethod("mean"), PeriodBy("month")
DEFAULT_UNITS = Units("IP")


def _print_summary(res) -> None:
    c = res.summary["counts"]
    typer.echo(
        f"Screened {c['buildings']} buildings ({res.summary['window'][0]} to {res.summary['window'][1]}): "
        f"{c['needs_review']} need review, {c['blocked_by_data']} need data fixed first, "
        f"{c['with_data_issues']} with data issues, {c['rejected_rows']} input rows rejected."
    )
    tiers = ", ".join(f"{k} {v}" for k, v in c["per_tier"].items())
    typer.echo(f"Tiers: {tiers}")
    if res.top:
        typer.echo(f"Top buildings to review: this quarter's audit plan, {c['audit_plan']} visit(s) (audit_plan.csv)")
        for t in res.top:
            ratio = "" if t["ratio"] is None else f", {t['ratio']:.2f}× expected"
            strong = ", strong evidence" if t["needs_review"] else ""
            typer.echo(
                f"  {t['rank']:>4}. {t['building_id']}  {t['name'][:40]}  (expected savings about "
                f"{t['currency']}{t['expected_recoverable_cost']:,.0f} a year{ratio}{strong})"
            )
    else:
        typer.echo("No building's expected savings are worth a visit ([plan] audit_cost).")
    typer.echo(f"Outputs: {res.out_dir}  (database {res.db_path})")


COLUMNS_HELP = (
    "your column names for ours: KIND:Their name=our_name,… (KIND buildings, readings, weather or events; "
    "repeat for each kind); adds to \\[inputs.columns] of the config"
)
DATE_ORDER_HELP = f"order of slash dates like 03/04/2025: {_either(choices.DATE_ORDERS)} (\\[reading] date_order)"


def _reading_overrides(overrides: dict, columns: list[str] | None, date_order: DateOrder | None) -> None:
    """--columns and --date-order into the config overrides (checked with the config)."""
    from .colmap import parse_option

    if columns:
        overrides.setdefault("inputs", {})["columns"] = parse_option(columns)
    if date_order is not None:
        overrides.setdefault("reading", {})["date_order"] = date_order.value


@app.command()
def run(
    buildings: Annotated[Optional[str], typer.Option(help="buildings CSV (or glob)")] = None,
    readings: Annotated[Optional[str], typer.Option(help="readings CSV (or glob)")] = None,
    weather: Annotated[Optional[str], typer.Option(help="daily weather CSV (or glob)")] = None,
    events: Annotated[
        Optional[str], typer.Option(help="optional events CSV (or glob): audits, findings, measures")
    ] = None,
    out: Annotated[Optional[str], typer.Option(help="output folder (default: \\[output] root/<quarter>)")] = None,
    db: Annotated[Optional[str], typer.Option(help="DuckDB file (default screening.duckdb)")] = None,
    as_of: Annotated[Optional[str], typer.Option("--as-of", help="YYYY-MM-DD; default today")] = None,
    date_from: Annotated[Optional[str], typer.Option("--from", help="window start YYYY-MM-DD")] = None,
    date_to: Annotated[Optional[str], typer.Option("--to", help="window end YYYY-MM-DD (inclusive)")] = None,
    units: Annotated[
        Optional[Units],
        typer.Option(case_sensitive=False, help=f"{_either(choices.UNIT_SYSTEMS)} (units of inputs and outputs)"),
    ] = None,
    config: Annotated[Optional[str], typer.Option(help="TOML config file")] = None,
    force: Annotated[bool, typer.Option(help="reload every input and replace an existing quarter")] = False,
    no_sheets: Annotated[bool, typer.Option("--no-sheets", help="skip the per-building PDF sheets")] = False,
    quiet: Annotated[bool, typer.Option(help="errors only (for cron)")] = False,
    verbose: Annotated[bool, typer.Option(help="more detail on stderr")] = False,
    columns: Annotated[Optional[list[str]], typer.Option("--columns", help=COLUMNS_HELP)] = None,
    date_order: Annotated[
        Optional[DateOrder], typer.Option("--date-order", case_sensitive=False, help=DATE_ORDER_HELP)
    ] = None,
):
    """Load the files, screen the portfolio and write ranking.csv, ranking.pdf, sheets/ and summary.json."""
    from . import runner

    _log_to_stderr(quiet, verbose)
    overrides = {
        "inputs": {"buildings": buildings, "readings": readings, "weather": weather, "events": events},
        "store": {"database": db},
        "analysis": {
            "as_of": as_of,
            "window_from": date_from,
            "window_to": date_to,
            "units": units.value if units else None,
        },
        "output": {"sheets": False if no_sheets else None},
    }
    if out is None and config is None:
        out = "ddscreen-out"
    with _mapped_errors():
        _reading_overrides(overrides, columns, date_order)
        res = runner.run(
            config_path=config, overrides=overrides, out_dir=out, force=force, quiet=quiet, progress=not quiet
        )
    if not quiet:
        _print_summary(res)


@app.command()
def demo(
    out: Annotated[str, typer.Option(help="output folder")] = "ddscreen-demo",
    no_sheets: Annotated[bool, typer.Option("--no-sheets", help="skip the per-building PDF sheets")] = False,
    quiet: Annotated[bool, typer.Option(help="errors only")] = False,
):
    """Screen the packaged sample portfolio (an invented scenario) into OUT."""
    from . import runner

    _log_to_stderr(quiet, False)
    with _mapped_errors():
        res = runner.demo(out, sheets=not no_sheets, progress=not quiet)
    if not quiet:
        _print_summary(res)


@app.command()
def validate(
    buildings: Annotated[Optional[str], typer.Option(help="buildings file (default: \\[inputs] of --config)")] = None,
    readings: Annotated[Optional[str], typer.Option(help="readings file (default: \\[inputs] of --config)")] = None,
    weather: Annotated[Optional[str], typer.Option(help="daily weather file (default: \\[inputs] of --config)")] = None,
    units: Annotated[Optional[Units], typer.Option(case_sensitive=False, help=_either(choices.UNIT_SYSTEMS))] = None,
    config: Annotated[Optional[str], typer.Option(help="TOML config file")] = None,
    columns: Annotated[Optional[list[str]], typer.Option("--columns", help=COLUMNS_HELP)] = None,
    date_order: Annotated[
        Optional[DateOrder], typer.Option("--date-order", case_sensitive=False, help=DATE_ORDER_HELP)
    ] = None,
    events: Annotated[Optional[str], typer.Option(help="optional events CSV (or glob) to check too")] = None,
):
    """Check the three files (and an events file) and print every problem; load nothing. Exit 0 when clean,
    2 otherwise.

    A file not given as an option is taken from the config's \\[inputs] (a glob: every file it matches).
    When a file lacks required columns, prints a column mapping to check and paste into the config.
    """
    from . import runner

    with _mapped_errors():
        overrides = {"analysis": {"units": units.value if units else None}}
        _reading_overrides(overrides, columns, date_order)
        v = runner.validate(buildings, readings, weather, config_path=config, overrides=overrides, events=events)
    for n in v.notices:
        typer.echo(f"notice: {n}")
    for p in v.problems:
        typer.echo(p)
    if v.suggestions:
        typer.echo(
            "Suggested column mapping (check each line; paste it into the config file, or pass the same "
            "with --columns):"
        )
        for block in v.suggestions:
            typer.echo(block)
    counts = ", ".join(f"{k} {n} rows accepted" for k, n in v.rows.items())
    typer.echo(f"{len(v.problems)} problem(s); {counts}")
    raise typer.Exit(0 if v.ok else EXIT_BAD_INPUT)


@app.command("degree-days")
def degree_days(
    weather: Annotated[str, typer.Option(help="daily weather CSV (station_id, date, t_min/t_max or t_mean)")],
    station: Annotated[str, typer.Option(help="station id")],
    base: Annotated[float, typer.Option(help="base temperature (°F for IP, °C for SI)")] = 65.0,
    kind: Annotated[DegreeDayKind, typer.Option(help=_either(choices.DEGREE_DAY_KINDS))] = DEFAULT_KIND,
    method: Annotated[DegreeDayMethod, typer.Option(help=_either(choices.DEGREE_DAY_METHODS))] = DEFAULT_METHOD,
    by: Annotated[PeriodBy, typer.Option(help=_either(choices.PERIODS_BY))] = DEFAULT_BY,
    periods: Annotated[Optional[str], typer.Option(help="CSV of periods (start, end) for --by period")] = None,
    hourly: Annotated[
        Optional[str], typer.Option(help="hourly CSV (station_id, timestamp, temperature) for --method hourly")
    ] = None,
    date_from: Annotated[Optional[str], typer.Option("--from", help="first day YYYY-MM-DD")] = None,
    date_to: Annotated[Optional[str], typer.Option("--to", help="last day YYYY-MM-DD (inclusive)")] = None,
    normal: Annotated[bool, typer.Option(help="normal-year values from the complete years")] = False,
    units: Annotated[Units, typer.Option(case_sensitive=False, help=_either(choices.UNIT_SYSTEMS))] = DEFAULT_UNITS,
    fmt: Annotated[OutputFormat, typer.Option("--format", help="csv or table")] = OutputFormat.csv,
    rounding: Annotated[
        bool, typer.Option(help="round each daily mean half up first, as weather services publish")
    ] = False,
    date_order: Annotated[
        Optional[DateOrder], typer.Option("--date-order", case_sensitive=False, help=DATE_ORDER_HELP)
    ] = None,
):
    """Degree days of one station, to stdout (notices on stderr)."""
    from . import ddtool

    notices: list[str] = []
    with _mapped_errors(value_error_is_bad_input=True):
        df = ddtool.degree_days_report(
            weather,
            station,
            base=base,
            kind=kind.value,
            method=method.value,
            by=by.value,
            periods_path=periods,
            date_from=date_from,
            date_to=date_to,
            normal=normal,
            units=units.value,
            hourly_path=hourly,
            rounding=rounding,
            notices=notices,
            date_order=date_order.value if date_order else None,
        )
    for n in notices:
        typer.echo(n if n.startswith("warning:") else f"notice: {n}", err=True)
    if fmt is OutputFormat.csv:
        sys.stdout.write(df.write_csv())
    else:
        import polars as pl

        with pl.Config(
            tbl_rows=-1,
            tbl_cols=-1,
            tbl_width_chars=250,
            tbl_hide_dataframe_shape=True,
            tbl_hide_column_data_types=True,
        ):
            typer.echo(str(df))


@app.command()
def init(
    path: Annotated[str, typer.Argument(help="where to write the config")] = "screening.toml",
    force: Annotated[bool, typer.Option(help="overwrite an existing file")] = False,
    sources: Annotated[
        Optional[list[str]],
        typer.Option(
            "--from",
            help="an input file (or KIND=FILE) to point the config at, with the column mapping inferred "
            "from its header; repeat for each file",
        ),
    ] = None,
):
    """Write a commented configuration template (with --from: for your own files, mapping to confirm)."""
    from . import runner

    report: list[str] = []
    with _mapped_errors():
        p = runner.init_config(path, overwrite=force, sources=sources, report=report)
    for line in report:
        typer.echo(line)
    typer.echo(f"wrote {p}" + ("; check the [inputs.columns] tables at its end before running" if report else ""))


@app.command()
def status(
    db: Annotated[str, typer.Option(help="DuckDB file")] = "screening.duckdb",
    config: Annotated[Optional[str], typer.Option(help="TOML config file (for its database path)")] = None,
    limit: Annotated[int, typer.Option(help="how many runs")] = 10,
):
    """The last runs: status, window and where their outputs are."""
    from . import config as cfgmod, runner

    with _mapped_errors():
        if config:
            db = cfgmod.load(config)["store"]["database"]
        runs = runner.status(db, limit)
    if runs.height == 0:
        typer.echo("no runs recorded yet")
        return
    for r in runs.iter_rows(named=True):
        typer.echo(
            f"{r['run_key']}  {r['status']:<11} window {r['window_start']}..{r['window_end']}  "
            f"started {r['started_at']:%Y-%m-%d %H:%M}  {r['out_dir'] or '-'}"
        )


@app.command()
def history(
    db: Annotated[str, typer.Option(help="DuckDB file")] = "screening.duckdb",
    older: Annotated[Optional[str], typer.Option(help="run id of the older run (as on its outputs)")] = None,
    newer: Annotated[Optional[str], typer.Option(help="run id of the newer run (as on its outputs)")] = None,
    events: Annotated[
        Optional[list[str]],
        typer.Option(help="events file (path or glob) to show beside the changes; default: the newer run's"),
    ] = None,
):
    """List the runs and show what changed between two of them (default: the last two successful),
    with the events between them beside each building."""
    from . import runner

    with _mapped_errors():
        runs, diff = runner.history(db, older, newer, events=events)
    for r in runs.iter_rows(named=True):
        typer.echo(f"{r['run_key']}  {r['status']:<11} window {r['window_start']}..{r['window_end']}")
    if diff is None:
        typer.echo("fewer than two successful runs: nothing to compare")
        return
    import polars as pl

    changed = diff.filter(pl.col("change") != "same rank")
    typer.echo(f"{changed.height} building(s) changed rank or flags:")
    for r in changed.iter_rows(named=True):
        typer.echo(f"  {r['building_id']}: {r['change']}" + (f"  | events: {r['events']}" if r["events"] else ""))
    quiet = diff.filter((pl.col("change") == "same rank") & pl.col("events").is_not_null())
    if quiet.height:
        typer.echo(f"{quiet.height} building(s) with events and the same rank:")
        for r in quiet.iter_rows(named=True):
            typer.echo(f"  {r['building_id']}: events: {r['events']}")


def main() -> None:
    # SIGINT/SIGTERM -> errors.Interrupted; when this is the program (not a test calling main()),
    # both are ignored once the command is over, while the interpreter shuts down
    as_program = getattr(sys.modules.get("__main__"), "main", None) is main
    _reported.clear()
    with interrupts.stop_on_signals(ignore_after=as_program):
        try:
            app()
        except SystemExit:
            stop = interrupts.stopped()
            if stop is not None and not _reported:
                # a stop signal outside a command's own handling (typer turns it into a silent 130)
                _exit_with(Interrupted(stop))
            raise
        except BaseException as exc:  # noqa: BLE001 - last line of defence: no traceback for users
            _exit_with(exc)


def _exit_with(exc: BaseException) -> None:
    try:
        _fail(exc)
    except typer.Exit as e:
        sys.exit(e.exit_code)


if __name__ == "__main__":
    main()
