"""Option vocabularies of the pools (one place, read by the validators and the messages)."""

from __future__ import annotations

from typing import Literal

PoolScheme = Literal["equal", "inverse_score", "optimal"]
SCHEMES: tuple[str, ...] = ("equal", "inverse_score", "optimal")
#: schemes whose weights are learnt from scored forecasts (and so may fall back to equal weights)
LEARNT: tuple[str, ...] = ("inverse_score", "optimal")
