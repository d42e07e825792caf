"""Plain-text tables of relative scores for the terminal (``harness score``)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.colours import significance


def relative_text(ev, score: str = "crps", subperiods=None) -> str:
    """Relative-score tables per variable and sub-period: rows models, columns horizons.

    The number and its label are the score registry's (e.g. ``se_mean`` as the RMSE ratio), the
    same as in the report and the CSV files.
    """
    from harness.scores import resolve

    rel, tests = ev.relative, ev.tests
    subs = subperiods or ev.subperiod_names
    rcol = resolve(score)
    if rcol is None or rcol.relative_name not in rel:
        names = sorted(c for c in rel.columns if resolve(c) is not None)
        raise ValueError(f"score {score!r} has no relative table; choose one of {names}")
    better = "< 0" if rcol.score.versus == "difference" else "< 1"
    short = rcol.relative_label.removesuffix(" ratio")
    out = [f"Relative {short}: {rcol.relative_label} against the benchmark '{ev.benchmark}' ({better} = better), "
           f"truth '{ev.truth}'.",
           f"Markers: {_test_label(ev)} against the benchmark: ↓ significantly better, ↑ significantly worse, "
           "*** 1 %, ** 5 %, * 10 % (none when n is too small); best per column marked with '<'; "
           "n = forecasts per cell.", ""]
    score_name, score = score, rcol.relative_name
    for var in pd.unique(rel["variable"]):
        for sub in subs:
            r = rel[(rel["variable"] == var) & (rel["subperiod"] == sub)]
            if r.empty:
                continue
            wide = r.pivot_table(index="model", columns="horizon", values=score, aggfunc="first")
            n = r.pivot_table(index="model", columns="horizon", values="n", aggfunc="first")
            models = [ev.benchmark] + [m for m in wide.index if m != ev.benchmark]
            wide = wide.reindex(models)
            t = tests[(tests["variable"] == var) & (tests["subperiod"] == sub) & (tests["score"] == score_name)] \
                if len(tests) else tests
            pv = t.pivot_table(index="model", columns="horizon", values="pvalue", aggfunc="first") if len(t) else None
            cells = pd.DataFrame(index=wide.index, columns=wide.columns, dtype=object)
            for h in wide.columns:
                col = wide[h]
                best = col.idxmin() if col.notna().any() else None
                for m in wide.index:
                    v = col[m]
                    if not np.isfinite(v):
                        cells.loc[m, h] = "  –  "
                        continue
                    p = pv.loc[m, h] if (pv is not None and m in pv.index and h in pv.columns) else None
                    mark = significance(p, v - (0.0 if rcol.score.versus == "difference" else 1.0))
                    cells.loc[m, h] = f"{v:5.2f}{mark:<4} {'<' if m == best else ' '}"
            counts = n.max(axis=0).reindex(wide.columns)
            cells.loc["n"] = [f"{int(c)}" if np.isfinite(c) else "0" for c in counts]
            cells.columns = [f"h={h}" for h in cells.columns]
            out.append(f"{var} — {sub}")
            out.append(cells.to_string())
            out.append("")
    return "\n".join(out)


def _test_label(ev) -> str:
    from harness.compare.registry import comparison_tests

    pair = comparison_tests("pairwise")[0]
    settings = getattr(getattr(ev.manifest, "scoring", None), "tests", None) or {}
    method = pair.settings(settings.get(pair.name)).get("method")
    return pair.label + (f" ({method})" if method else "")


def decision_text(verdicts) -> str:
    """The decision table for the terminal: one line per candidate × variable × band, verdict first."""
    t = verdicts.table
    if t is None or not len(t):
        return "Decision table: no candidate has scored forecasts yet."
    out = [f"Decision table: every candidate against {verdicts.benchmark} ({verdicts.score.upper()}, truth "
           f"'{verdicts.truth}', level {verdicts.alpha:g}); verdicts: better / no evidence / worse.", ""]
    for var, g in t.groupby("variable", sort=False):
        out.append(f"{var}")
        for r in g.itertuples():
            out.append(f"  {r.band:<9} {r.model:<12} {r.verdict:<11} {r.reasons}")
        out.append("")
    return "\n".join(out)
