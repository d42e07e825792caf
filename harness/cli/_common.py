"""Shared CLI plumbing: turning library errors into one-line messages and exit codes.

Exit codes, the same for every command (README, "Exit codes"):

=====  ===================================================================================
0      success
1      data or input error: a malformed or conflicting file, a missing store or run, a
       corrupt file, a full disk or a permission problem (the message names the file)
2      usage or spec error: an unknown option or option value (truth rule, score,
       variable, model, transform), a spec refused by its checks
3      another writer holds the lock of the store, run directory or cache: retry later
4      the run finished, but some tasks failed (they are listed; ``--retry-failed`` reruns them)
130    interrupted (SIGINT); 143 terminated (SIGTERM): finished work is kept
=====  ===================================================================================
"""

from __future__ import annotations

import functools
import os
import sys

import typer

DATA_ERROR = 1
USAGE_ERROR = 2
LOCKED_ERROR = 3  # another writer holds a store's lock: retry later
TASKS_FAILED = 4  # the run finished with failed tasks


def fail(message: str, code: int = DATA_ERROR) -> None:
    """Print ``error: message`` on stderr and exit with ``code``."""
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(code=code)


def exit_code(exc: BaseException) -> int:
    """The documented exit code of an expected failure (see the module docstring)."""
    from harness.backtest.errors import CacheBusyError, RunLockedError
    from harness.errors import OptionError, SpecError
    from vintages import StoreLockedError

    if isinstance(exc, (StoreLockedError, RunLockedError, CacheBusyError)):
        return LOCKED_ERROR
    if isinstance(exc, (SpecError, OptionError)):
        return USAGE_ERROR
    return DATA_ERROR


def friendly(func):
    """Run a command; expected failures become one line on stderr and the documented exit code."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except typer.Exit:
            raise
        except KeyboardInterrupt as exc:
            typer.echo("interrupted", err=True)
            # 128 + the signal's number, as shells report it (SIGINT 130, SIGTERM 143)
            raise typer.Exit(code=128 + getattr(exc, "signum", 2)) from None
        except (ValueError, KeyError, FileNotFoundError, FileExistsError, RuntimeError, OSError) as exc:
            if os.environ.get("HARNESS_DEBUG"):
                raise  # HARNESS_DEBUG=1 shows the full traceback
            msg = str(exc.args[0]) if isinstance(exc, KeyError) and exc.args else str(exc)
            # one line: the first line of the message carries what failed and where
            typer.echo(f"error: {msg.splitlines()[0] if msg else type(exc).__name__}", err=True)
            raise typer.Exit(code=exit_code(exc)) from None

    return wrapper


def output_format(fmt, out) -> str:
    """The output format of a table command (``--format``, a string or an enum member, else the
    ``--out`` suffix), checked before any work: a bad one is a FormatError, exit 2."""
    from harness.report.textout import resolve_format

    return resolve_format(getattr(fmt, "value", fmt), out)


def echo_table(df, fmt: str = "table") -> None:
    """Print a DataFrame as an aligned table or CSV on stdout."""
    if fmt == "csv":
        sys.stdout.write(df.to_csv(index=False))
    else:
        typer.echo(df.to_string(index=False) if len(df) else "(no rows)")
