"""``ddscreen init``: the commented configuration template, and with ``--from`` the inputs, column
mappings and number format inferred from the user's files."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from ..errors import ConfigError, InputError, OutputError


CONFIG_TEMPLATE_HEADER = """# ddscreen configuration (TOML). Every key is optional; defaults are shown.
# Relative paths are taken from this file's folder. Run:  ddscreen run --config {name}
"""


#: Keys the template shows as a commented example while they keep their default (the file then also
#: loads in versions before the key existed).
TEMPLATE_EXAMPLES = {("reading", "thousands"): '","'}


def init_config(
    path: str, *, overwrite: bool = False, sources: list[str] | None = None, report: list[str] | None = None
) -> Path:
    """Write a commented configuration template with every key and its default.

    With ``sources`` (files, or ``KIND=FILE``) the inputs point at those files, each file's kind
    is taken from its header where not given, and the column mapping that could be inferred is
    written as ``[inputs.columns.KIND]`` tables, every line commented with how it was found, for
    the user to confirm. ``report`` receives one line per file (what was found, what is missing).
    """
    p = Path(path)
    if p.exists() and not overwrite:
        raise ConfigError(f"{p} exists; use --force to overwrite it")
    from ..config import DEFAULTS, template_comments

    report = report if report is not None else []
    inputs, blocks = _infer_inputs(sources or [], p, report)
    reading, why = _infer_number_format(sources or [], report)
    lines = [CONFIG_TEMPLATE_HEADER.format(name=p.name)]
    for section, values in DEFAULTS.items():
        lines.append(f"[{section}]")
        for key, value in values.items():
            comment = template_comments().get((section, key), "")
            if section == "inputs" and key in inputs:
                value = inputs[key]
            if section == "reading" and key in reading:
                lines.append(f"{key} = {_toml_value(reading[key])}  # {why}: check it")
                continue
            if isinstance(value, dict):
                lines.append(f"# {key}: your column names → ours, one table per file kind, e.g.")
                lines.append("#   [inputs.columns.readings]")
                lines.append(
                    '#   "Usage" = "quantity"'
                    + ("   (the tables inferred from your files are at the end)" if blocks else "")
                )
                continue
            if value is None:
                lines.append(f"# {key} = 0.37" + (f"  # {comment}" if comment else ""))
                continue
            if (section, key) in TEMPLATE_EXAMPLES and value == DEFAULTS[section][key]:
                lines.append(f"# {key} = {TEMPLATE_EXAMPLES[(section, key)]}" + (f"  # {comment}" if comment else ""))
                continue
            lines.append(f"{key} = {_toml_value(value)}" + (f"  # {comment}" if comment else ""))
        lines.append("")
    if blocks:
        lines.append("# Column mappings inferred from your files' headers: check every line (a run uses them as")
        lines.append("# written and guesses nothing itself), then run:  ddscreen validate --config " + p.name + " ...")
        lines += blocks
    try:
        p.write_text("\n".join(lines), encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"{p}: cannot write ({exc.strerror or exc})") from None
    return p


def _infer_inputs(sources: list[str], cfg_path: Path, report: list[str]) -> tuple[dict[str, str], list[str]]:
    """For ``init --from``: each file's kind and inferred column mapping (TOML blocks)."""
    from .. import colmap
    from ..config import column_names
    from ..csvread import read_header, split_sheet

    inputs: dict[str, str] = {}
    blocks: list[str] = []
    for src in sources:
        kind, sep, file = src.partition("=")
        if not sep or kind.strip().lower() not in column_names():
            kind, file = "", src
        kind = kind.strip().lower()
        if not Path(split_sheet(file)[0]).is_file():
            raise InputError(file, "file not found")
        header = read_header(file)
        if kind:
            sug = colmap.suggest(header, kind)
            missing = colmap.missing_after(header, kind, {t: o for t, o, _ in sug})
        else:
            kind, sug, missing = colmap.best_kind(header)
        if kind in inputs:
            raise ConfigError(
                f"init --from: {inputs[kind]} and {file} both look like {kind} files; give one file "
                "per kind (KIND=FILE to say which), and put a glob in the config for several"
            )
        try:
            book, sheet = split_sheet(file)
            rel = os.path.relpath(Path(book).resolve(), cfg_path.resolve().parent)
            shown = rel + (("#" + sheet) if sheet else "")
        except ValueError:
            shown = str(Path(file).resolve())
        inputs[kind] = shown
        if sug:
            block = colmap.toml_block(kind, sug)
            if missing:
                block += "\n# still missing: " + ", ".join(missing) + " (add a line for each)"
            blocks += [f"# from {file}", block, ""]
        ours = {colmap._key(c) for c in column_names()[kind]}
        mapped = {t for t, _, _ in sug}
        unused = [h for h in header if h.strip() and h not in mapped and colmap._key(h) not in ours]
        report.append(
            f"{file}: read as {kind}; {len(sug)} column(s) mapped"
            + (f"; still missing {', '.join(missing)}" if missing else "")
            + (
                f"; not used (no column of ours matches; add a line if one should be): {', '.join(unused)}"
                if unused
                else ""
            )
        )
    return inputs, blocks


def _infer_number_format(sources: list[str], report: list[str]) -> tuple[dict, str]:
    """For ``init --from``: ``[reading]`` number settings shown by the files' values, with the reason.

    ``1,855.76`` (a comma group before a decimal point) → ``thousands = ","``; ``1.855,76`` →
    ``decimal_comma = true`` and ``thousands = "."``. Values that fit both (``1,485``) decide nothing.
    """
    import polars as pl
    from ..csvread import _norm, read_header, read_table

    us = r"^[-+]?[$€£¥]?\s*\d{1,3}(,\d{3})+\.\d+\s*[$€£¥]?$"
    eu = r"^[-+]?[$€£¥]?\s*\d{1,3}(\.\d{3})*\.\d{3},\d+\s*[$€£¥]?$|^[-+]?[$€£¥]?\s*\d+,\d{1,2}\s*[$€£¥]?$"
    seen: dict[str, tuple[Any, str, str] | None] = {"us": None, "eu": None}
    for src in sources:
        file = (
            src.partition("=")[2]
            if "=" in src and src.partition("=")[0].strip().lower() in ("buildings", "readings", "weather")
            else src
        )
        try:
            names = [_norm(h) for h in read_header(file) if _norm(h)]
            t = read_table(file, required=[], optional=list(dict.fromkeys(names)))
        except (InputError, ValueError):
            continue
        for c in t.df.columns:
            if c == "_line" or t.df[c].dtype != pl.String:
                continue
            col = t.df[c].head(5000).drop_nulls()
            for kind, pat in (("us", us), ("eu", eu)):
                hit = col.filter(col.str.contains(pat))
                if hit.len() and seen[kind] is None:
                    seen[kind] = (hit[0], c, file)
    if seen["us"] and not seen["eu"]:
        v, c, f = seen["us"]
        why = f"inferred from values like {v!r} in {c} of {f}"
        report.append(f'[reading] thousands = "," ({why})')
        return {"thousands": ","}, why
    if seen["eu"] and not seen["us"]:
        v, c, f = seen["eu"]
        why = f"inferred from values like {v!r} in {c} of {f}"
        report.append(f'[reading] decimal_comma = true, thousands = "." ({why})')
        return {"decimal_comma": True, "thousands": "."}, why
    return {}, ""


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(v)
