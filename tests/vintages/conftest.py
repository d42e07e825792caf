"""Hand-made release logs shared by the information-set, truth and transform tests.

Invented numbers (the Veldmark statistics office); expected values are worked out by hand from
the published definitions next to each check.
"""

from __future__ import annotations

import pandas as pd
import pytest

from vintages.cube import Cube

# A small release triangle of quarterly gdp levels (invented):
#   release      2009Q3  2009Q4  2010Q1  2010Q2  2010Q3
#   2010-04-30   100.0   101.0   102.0
#   2010-05-30           101.2   102.4
#   2010-07-30                   102.6   103.0
#   2010-10-30                           103.5   104.0
GDP_ROWS = [
    ("gdp", "2009Q3", "2010-04-30", 100.0),
    ("gdp", "2009Q4", "2010-04-30", 101.0),
    ("gdp", "2010Q1", "2010-04-30", 102.0),
    ("gdp", "2009Q4", "2010-05-30", 101.2),
    ("gdp", "2010Q1", "2010-05-30", 102.4),
    ("gdp", "2010Q1", "2010-07-30", 102.6),
    ("gdp", "2010Q2", "2010-07-30", 103.0),
    ("gdp", "2010Q2", "2010-10-30", 103.5),
    ("gdp", "2010Q3", "2010-10-30", 104.0),
]
# Monthly industrial production (invented): each release adds a month; 2010-01 is revised once.
IP_ROWS = [
    ("ip", "2010-01", "2010-02-15", 10.0),
    ("ip", "2010-01", "2010-03-15", 11.0),
    ("ip", "2010-02", "2010-03-15", 12.0),
    ("ip", "2010-03", "2010-04-15", 13.0),
    ("ip", "2010-04", "2010-05-15", 14.0),
    ("ip", "2010-05", "2010-06-15", 16.0),
    ("ip", "2010-06", "2010-07-15", 18.0),
]
META = {"gdp": {"freq": "Q"}, "ip": {"freq": "M"}}


def cube_of(rows, meta) -> Cube:
    """A cube from (variable, period, release, value) tuples."""
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    df["release"] = pd.to_datetime(df["release"])
    return Cube.from_log(df, meta)


@pytest.fixture
def make_cube():
    return cube_of


@pytest.fixture
def gdp_rows():
    return list(GDP_ROWS)


@pytest.fixture
def cube() -> Cube:
    """Quarterly gdp and monthly ip, as in the tables above."""
    return cube_of(GDP_ROWS + IP_ROWS, META)
