"""Domain exceptions and the exit-code contract.

The CLI maps each exception class to one exit code and prints ``str(exc)`` as a
single line; nothing here prints or exits.

Exit codes: 0 ok · 1 run failed · 2 bad input or configuration · 3 another run holds the lock ·
130 stopped by SIGINT (Ctrl-C) · 143 stopped by SIGTERM (128 + the signal number, the shell's
convention; see :class:`Interrupted` and ``screening/interrupts.py``).
"""

from __future__ import annotations

EXIT_OK = 0
EXIT_RUN_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_LOCKED = 3
EXIT_SIGINT = 130  # 128 + SIGINT (2)
EXIT_SIGTERM = 143  # 128 + SIGTERM (15)


class ScreeningError(Exception):
    """Base class of every error the tool reports to a user."""

    exit_code = EXIT_RUN_FAILED


class InputError(ScreeningError):
    """A structural problem with an input file: the run stops before writing anything.

    The message names the file, and where known the line, column, value and what was
    expected, in one line.
    """

    exit_code = EXIT_BAD_INPUT

    def __init__(
        self,
        path,
        problem: str,
        *,
        line: int | None = None,
        column: str | None = None,
        value: object = None,
        expected: str | None = None,
    ):
        self.path = str(path)
        self.problem = problem
        self.line = line
        self.column = column
        self.value = value
        self.expected = expected
        parts = [self.path]
        if line is not None:
            parts.append(f"line {line}")
        if column is not None:
            parts.append(f"column {column!r}")
        msg = ": ".join([", ".join(parts), problem])
        if value is not None:
            msg += f" (got {str(value)[:80]!r})"
        if expected:
            msg += f"; expected {expected}"
        super().__init__(msg)

    def __reduce__(self):
        """Pickled with its fields (an error raised in a worker process reaches the run whole)."""
        return (_input_error, (self.path, self.problem, self.line, self.column, self.value, self.expected))


def _input_error(path, problem, line, column, value, expected) -> InputError:
    return InputError(path, problem, line=line, column=column, value=value, expected=expected)


class ConfigError(ScreeningError):
    """A bad configuration file or option: names the key and what is expected."""

    exit_code = EXIT_BAD_INPUT


class LockedError(ScreeningError):
    """Another run holds the lock on the database or output root."""

    exit_code = EXIT_LOCKED


class StoreError(ScreeningError):
    """The database file cannot be opened or written (locked by another program, corrupt, read-only)."""

    exit_code = EXIT_RUN_FAILED


class OutputError(ScreeningError):
    """Outputs cannot be written (read-only folder, full disk); earlier outputs stay intact."""

    exit_code = EXIT_RUN_FAILED


class RenderError(OutputError):
    """A sheet or report could not be laid out or written (names the building or file)."""


class Interrupted(KeyboardInterrupt):
    """The process was asked to stop by SIGINT or SIGTERM (raised by ``screening/interrupts.py``).

    Derived from :class:`KeyboardInterrupt`, not from :class:`ScreeningError`, on purpose: like
    Ctrl-C it must pass through every ``except Exception`` in this package and in the libraries it
    calls, and the code that treats Ctrl-C specially (transactions roll back, the renderer stops)
    treats SIGTERM the same. ``exit_code`` is 128 + the signal number (130 for SIGINT, 143 for
    SIGTERM); the message is one line, ``detail`` says what became of the outputs where known.
    """

    NAMES = {2: "SIGINT", 15: "SIGTERM"}

    def __init__(self, signum: int = 2, detail: str | None = None):
        self.signum = int(signum)
        self.detail = detail
        name = self.NAMES.get(self.signum, f"signal {self.signum}")
        super().__init__(f"interrupted by {name}" + (f"; {detail}" if detail else ""))

    @property
    def exit_code(self) -> int:
        return {2: EXIT_SIGINT, 15: EXIT_SIGTERM}.get(self.signum, 128 + self.signum)


class OutOfMemoryError(ScreeningError):
    """The run needs (or ran out of) more memory than the process may use; names both and what to do."""

    exit_code = EXIT_RUN_FAILED
