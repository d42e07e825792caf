"""Shared CLI plumbing: turning library errors into one-line messages and exit codes."""

from __future__ import annotations

import functools
import os
import sys

import typer

DATA_ERROR = 1
USAGE_ERROR = 2
LOCKED_ERROR = 3  # another writer holds a store's lock: retry later


def fail(message: str, code: int = DATA_ERROR) -> None:
    """Print ``error: message`` on stderr and exit with ``code``."""
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(code=code)


def friendly(func):
    """Run a command; expected failures become one line on stderr and exit code 1."""

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
            from harness.errors import SpecError

            msg = str(exc.args[0]) if isinstance(exc, KeyError) and exc.args else str(exc)
            # one line: the first line of the message carries what failed and where
            typer.echo(f"error: {msg.splitlines()[0] if msg else type(exc).__name__}", err=True)
            raise typer.Exit(code=USAGE_ERROR if isinstance(exc, SpecError) else DATA_ERROR) from None

    return wrapper


def echo_table(df, fmt: str = "table") -> None:
    """Print a DataFrame as an aligned table or CSV on stdout."""
    if fmt == "csv":
        sys.stdout.write(df.to_csv(index=False))
    else:
        typer.echo(df.to_string(index=False) if len(df) else "(no rows)")
