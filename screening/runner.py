"""Whole runs: the public entry of ``screening.runs`` (the CLI, docs/python.md and tests import it).

Everything the command line does is a function here: :func:`run`, :func:`demo`,
:func:`validate`, :func:`status`, :func:`history`, :func:`init_config`. Where each part lives is
in ``screening/runs/__init__.py`` and DEVELOPERS.md's architecture map.
"""

from __future__ import annotations

from .runs.demo import OUTPUT_NAMES, demo
from .runs.init import init_config
from .runs.phases import RunResult, run
from .runs.record import diff_results, history, status
from .runs.validate import Validation, validate

__all__ = [
    "OUTPUT_NAMES",
    "RunResult",
    "Validation",
    "demo",
    "diff_results",
    "history",
    "init_config",
    "run",
    "status",
    "validate",
]
