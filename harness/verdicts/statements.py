"""Plain-words statements per target variable, each built only from the decision table's rows."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from harness.verdicts.decide import BETTER, WORSE, Verdicts, _fmt_p


@dataclass(frozen=True)
class Statement:
    """A sentence for the meeting and the decision-table rows it rests on (model, variable, band)."""

    variable: str
    text: str
    rows: tuple[tuple[str, str, str], ...]


def _bands_of(t: pd.DataFrame) -> list[str]:
    return list(pd.unique(t["band"]))


def statements(v: Verdicts) -> list[Statement]:
    """One statement per target variable: who is better or worse than the incumbent, and where.

    Every clause names the band and repeats the row's ratio and p-value, so it can be checked
    against the decision table; a variable with no significant difference says so.
    """
    out = []
    t = v.table
    if not len(t):
        return out
    for var, g in t.groupby("variable", sort=False):
        rows = []
        clauses = []
        for word in (BETTER, WORSE):
            w = g[g["verdict"] == word]
            for m, gm in w.groupby("model", sort=False):
                cells = ", ".join(f"{r.band} (ratio {r.ratio:.2f}, {_fmt_p(r.pvalue)})" for r in gm.itertuples())
                clauses.append(f"{m} is {word} than {v.benchmark} at {cells}")
                rows += [(m, var, r.band) for r in gm.itertuples()]
        if not clauses:
            small = g[g["test_note"].astype(str).str.startswith("n too small")]
            tail = (f"; {len(small)} of {len(g)} cells rest on too few forecasts to test" if len(small) else "")
            clauses.append(f"no candidate differs significantly from {v.benchmark} in any band{tail}")
            rows += [(r.model, var, r.band) for r in g.itertuples()]
        sets = v.band_sets[v.band_sets["variable"] == var]
        for band in _bands_of(g):
            s = sets[(sets["band"] == band) & sets["in_set"].astype(bool)]
            if len(s):
                clauses.append(f"best set at {band}: {', '.join(sorted(s['model']))}")
        out.append(Statement(str(var), f"{var}: " + "; ".join(clauses) + ".", tuple(rows)))
    return out
