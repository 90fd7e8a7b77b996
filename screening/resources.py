"""Locate the files that ship beside the code: SQL, templates, sample portfolio, data.

In a wheel they are copied to ``screening/_sql``, ``screening/_templates`` and
``screening/_sample_portfolio``; in a source checkout (editable install, tests) they
are the top-level ``sql/``, ``templates/`` and ``sample_portfolio/`` folders.
"""

from __future__ import annotations

from pathlib import Path

_PKG = Path(__file__).resolve().parent
_REPO = _PKG.parent


def _locate(installed: str, source: str) -> Path:
    for candidate in (_PKG / installed, _REPO / source):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(f"package resource folder {source!r} not found next to {_PKG}")


def sql_dir() -> Path:
    return _locate("_sql", "sql")


def templates_dir() -> Path:
    return _locate("_templates", "templates")


def sample_portfolio_dir() -> Path:
    return _locate("_sample_portfolio", "sample_portfolio")


def data_dir() -> Path:
    """Reference data files (CSV with a ``source`` column), inside the package."""
    return _PKG / "data"
