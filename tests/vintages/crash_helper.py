"""Subprocess driver for the store's crash and lock tests (not a test module).

Usage::

    python crash_helper.py append STORE BATCH.parquet POINT   # POINT: before-batch | before-manifest
                                                               #        | after-manifest | none
    python crash_helper.py append_many STORE POINT B1.parquet B2.parquet ...
                                                               # POINT also: between-batches
    python crash_helper.py describe STORE POINT                # POINT: before-manifest | after-manifest
    python crash_helper.py hold STORE                          # take the writer's lock until stdin closes

``append`` and ``append_many`` print ``ready`` just before calling :meth:`VintageStore.append` /
:meth:`VintageStore.append_many` (so a parent can time a kill inside the call) and ``done`` after
it; at the first time the store reaches ``POINT`` the process sends SIGKILL to itself, which no
handler can intercept: the closest a test gets to pulling the plug. ``describe`` sets the units
of variable ``a00`` to ``"killed-units"``.
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


def _kill_at(point: str):
    def hook(where: str) -> None:
        if where == point:
            os.kill(os.getpid(), signal.SIGKILL)

    return hook


def _append_many(store: str, point: str, batches: list[str]) -> None:
    st = VintageStore(store)
    items = [(pd.read_parquet(b), None, f"crash-test-{k}") for k, b in enumerate(batches, start=1)]
    print("ready", flush=True)
    st.append_many(items, _crash_hook=_kill_at(point))
    print("done", flush=True)


def _describe(store: str, point: str) -> None:
    st = VintageStore(store)
    print("ready", flush=True)
    st.describe("a00", units="killed-units", reason="crash test", _crash_hook=_kill_at(point))
    print("done", flush=True)


def _hold(store: str) -> None:
    st = VintageStore(store)
    with st._lock():
        print("locked", flush=True)
        sys.stdin.read()  # until the parent closes our stdin


if __name__ == "__main__":
    if sys.argv[1] == "append":
        _append(*sys.argv[2:5])
    elif sys.argv[1] == "append_many":
        _append_many(sys.argv[2], sys.argv[3], sys.argv[4:])
    elif sys.argv[1] == "describe":
        _describe(sys.argv[2], sys.argv[3])
    elif sys.argv[1] == "hold":
        _hold(sys.argv[2])
    else:
        raise SystemExit(f"unknown mode {sys.argv[1]!r}; expected one of ['append', 'append_many', 'describe', "
                         "'hold']")
