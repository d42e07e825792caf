"""Build the format-1 fixture stores with the previous version's code (run once; kept in git).

Run from a checkout of commit d16fda9 (the last version writing vintage-store/1)::

    PYTHONPATH=/path/to/that/checkout python tests/vintages/data/make_v1_stores.py tests/vintages/data

The data are invented (Veldmark); the second store holds the label the old reader misread
from full-width digits (stored as 0Q3).
"""

from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

from vintages.ingest import read_releases
from vintages.store import FORMAT, VintageStore

assert FORMAT == "vintage-store/1"
out = Path(sys.argv[1])
st = VintageStore.init(out / "store_v1")
gdp = pd.DataFrame({"variable": "gdp", "period": ["1959Q1", "1959Q2", "1959Q1", "1959Q3"],
                    "release": pd.to_datetime(["1959-05-15", "1959-08-14", "1959-08-14", "1959-11-13"]),
                    "value": [100.0, 101.25, 100.5, 102.0]})
st.append(gdp, {"gdp": {"units": "index 1959Q1=100", "description": "Veldmark real output"}}, source="gdp_1959.csv")
cpi = pd.DataFrame({"variable": "cpi", "period": ["1969-11", "1969-12", "1970-01"],
                    "release": pd.to_datetime(["1969-12-12", "1970-01-16", "1970-02-13"]),
                    "value": [1.5, 1.75, 2.0]})
st.append(cpi, {"cpi": {"units": "% y/y", "description": "Veldmark consumer prices"}}, source="cpi.csv")
fix = gdp.iloc[[1]].assign(value=101.5)
st.append(fix, supersede=True, source="fix.csv", reason="typo in the bulletin")
# A store written by the old version from a file with full-width digits: the label was misread.
bad = VintageStore.init(out / "store_v1_misread")
p = out / "fullwidth.csv"
p.write_text("variable,period,release,value\ngdp,2024Q2,2024-08-15,1.25\ngdp,\uff12\uff10\uff12\uff14Q3,2024-11-15,1.5\n")
bad.append(read_releases(p), source="fullwidth.csv")
p.unlink()
print(st.manifest()["format"], len(st.manifest()["batches"]), bad.read_log()["period"].tolist())
