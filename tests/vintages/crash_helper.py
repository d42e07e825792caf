"""Subprocess driver for the store's crash and lock tests (not a test module).

Usage::

    python crash_helper.py append STORE BATCH.parquet POINT   # POINT: before-batch | before-manifest
                                                               #        | after-manifest | none
    python crash_helper.py hold STORE                          # take the writer's lock until stdin closes

``append`` prints ``ready`` just before calling :meth:`VintageStore.append` (so a parent can time a
kill inside the append) and ``done`` after it; at ``POINT`` the process sends SIGKILL to itself,
which no handler can intercept: the closest a test gets to pulling the plug.
"""

from __future__ import annotations

import os
import signal
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import pandas as pd  # noqa: E402

from vintages.store import VintageStore  # noqa: E402


def _append(store: str, batch: str, point: str) -> None:
    def hook(where: str) -> None:
        if where == point:
            os.kill(os.getpid(), signal.SIGKILL)

    st = VintageStore(store)
    df = pd.read_parquet(batch)
    print("ready", flush=True)
    st.append(df, source="crash-test", _crash_hook=hook)
    print("done", flush=True)


def _hold(store: str) -> None:
    st = VintageStore(store)
    with st._lock():
        print("locked", flush=True)
        sys.stdin.read()  # until the parent closes our stdin


if __name__ == "__main__":
    if sys.argv[1] == "append":
        _append(*sys.argv[2:5])
    elif sys.argv[1] == "hold":
        _hold(sys.argv[2])
    else:
        raise SystemExit(f"unknown mode {sys.argv[1]!r}; expected one of ['append', 'hold']")
