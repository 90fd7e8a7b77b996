"""Whole runs and the commands around them, one module per job (the public entry is
``screening.runner``, which re-exports what the CLI and library users call).

- ``phases``: :func:`run`, the three phases under the lock in order, failures and stop signals;
- ``stages``: the run's stages: load the inputs, screen, write the outputs into the temporary folder;
- ``inputs``: the files a config names, the stored rows the screening reads (``StoreReadings``);
- ``publish``: the temporary folder, its rename into place, stale temporary folders, failure logs,
  ``latest`` and pruning (through ``screening/published.py``: only what the tool wrote);
- ``record``: the database's run records, results, summary, status, history, the change between runs;
- ``lock``: the run lock and opening the database while others briefly hold it;
- ``progress``: the stage bar and the test hooks at the run's stages;
- ``demo``, ``validate``, ``init``: the other commands.
"""
