"""Plain-text tables of relative scores for the terminal (``harness score``)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.colours import stars


def relative_text(ev, score: str = "crps", subperiods=None) -> str:
    """Relative-score tables per variable and sub-period: rows models, columns horizons.

    The number and its label are the score registry's (e.g. ``se_mean`` as the RMSE ratio), the
    same as in the report and the CSV files.
    """
    from harness.scores import resolve

    rel, tests = ev.relative, ev.tests
    subs = subperiods or ev.subperiod_names
    col = resolve(score)
    if col is None or col.relative_name not in rel:
        names = sorted(c for c in rel.columns if resolve(c) is not None)
        raise ValueError(f"score {score!r} has no relative table; choose one of {names}")
    better = "< 0" if col.score.versus == "difference" else "< 1"
    short = col.relative_label.removesuffix(" ratio")
    out = [f"Relative {short}: {col.relative_label} against the benchmark '{ev.benchmark}' ({better} = better), "
           f"truth '{ev.truth}'.",
           "Markers: Diebold–Mariano test with the Harvey–Leybourne–Newbold correction, "
           "*** 1 %, ** 5 %, * 10 %; [best] per column marked with '<'; n = forecasts per cell.", ""]
    score_name, score = score, col.relative_name
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
                    mark = stars(pv.loc[m, h]) if (pv is not None and m in pv.index and h in pv.columns) else ""
                    cells.loc[m, h] = f"{v:5.2f}{mark:<3}{'<' if m == best else ' '}"
            counts = n.max(axis=0).reindex(wide.columns)
            cells.loc["n"] = [f"{int(c)}" if np.isfinite(c) else "0" for c in counts]
            cells.columns = [f"h={h}" for h in cells.columns]
            out.append(f"{var} — {sub}")
            out.append(cells.to_string())
            out.append("")
    return "\n".join(out)
