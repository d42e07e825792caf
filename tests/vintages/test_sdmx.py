"""SDMX-CSV reader: files shaped like the standard's own examples are read into the long release
table, and every malformed file is refused with one line naming file, line and field.

Sources (every fixture below is hand-written in the shape of the example it names, with invented
Veldmark codes and values only):

* "SDMX-CSV 1.0": SDMX Technical Working Group, "SDMX-CSV Data Message field guide", format
  version 1.0, github.com/sdmx-twg/sdmx-csv; sections "Design principles", "Optional parameters",
  "Examples" 1) to 4).
* "SDMX-CSV 2.0": the same field guide for version 2.0 (aligned with SDMX 3.0.0); sections
  "Columns", "Column headers (first row)", "Column content (all rows after header)",
  "Optional parameters" and the named examples of "Examples".
* "SDMX 2.1 TN 4.2": SDMX Technical Working Group (2011), "SDMX 2.1 Standards, Section 6:
  Technical Notes", 4.2 "Time and Time Format" (4.2.4 Gregorian time period; reporting periods
  and REPORTING_YEAR_START_DAY).
* Records, quoted line breaks, equal field counts: Shafranovich (2005), IETF RFC 4180, section 2.

Expected values are found outside the reader: periods with ``pandas.Period`` (reference
library), numbers with Python's ``float``, days with ``numpy.datetime64``, line numbers by
searching the fixture's text (:func:`line_of`; header = line 1 is common practice).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages import InputError, VintageStore, validate_table
from vintages.sdmx import read_sdmx_csv, read_variable_map

MAP = {"gdp": "REF_AREA=VM, INDICATOR=GDP_R", "cpi": "REF_AREA=VM, INDICATOR=CPI"}

# SDMX-CSV 1.0, "Examples" 1): DATAFLOW first, dimensions, OBS_VALUE, attributes, a custom column.
V1 = """\
DATAFLOW,REF_AREA,INDICATOR,FREQ,TIME_PERIOD,OBS_VALUE,OBS_STATUS,UNIT_MEASURE,SERIESKEY
VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024-Q2,101.5,A,VMD,VM.GDP_R.Q
VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024-Q3,102.25,P,VMD,VM.GDP_R.Q
VMSO:NA_MAIN(1.0),VM,CPI,M,2024-07,2.1,A,PC,VM.CPI.M
VMSO:NA_MAIN(1.0),VM,CPI,M,2024-08,2.3,A,PC,VM.CPI.M
"""

# SDMX-CSV 2.0, "Examples", "Ordinary case": STRUCTURE, STRUCTURE_ID, ACTION, components and
# the custom column UPDATED (an ISO 8601 date-time in UTC).
V2 = """\
STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,FREQ,TIME_PERIOD,OBS_VALUE,OBS_STATUS,UPDATED
dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,Q,2024-Q2,101.5,A,2024-11-15T09:30:00Z
dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,Q,2024-Q3,102.25,P,2024-11-15T09:30:00Z
dataflow,VMSO:NA_MAIN(1.0.0),I,VM,CPI,M,2024-M07,2.1,A,2024-11-14T23:59:59+02:00
"""


def write(tmp_path: Path, name: str, text: str | bytes) -> Path:
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text, encoding="utf-8")
    return p


def line_of(text: str, needle: str) -> int:
    """1-based physical line of the first line containing ``needle`` (an independent reference)."""
    hits = [k for k, ln in enumerate(text.split("\n"), start=1) if needle in ln]
    assert hits, f"test bug: {needle!r} not in the file"
    return hits[0]


def expected(rows: list[tuple[str, pd.Period, str, str]], release: str) -> pd.DataFrame:
    """The long table built without the reader: pandas periods, float(), numpy days."""
    return table(pd.DataFrame({
        "variable": [r[0] for r in rows],
        "period": [str(r[1]) for r in rows],
        "release": np.array([np.datetime64(r[3] if len(r) > 3 else release, "D") for r in rows],
                            dtype="datetime64[D]").astype("datetime64[s]"),
        "value": np.array([float(r[2]) for r in rows], dtype=np.float64),
    }))


def table(df: pd.DataFrame) -> pd.DataFrame:
    """The four long-table columns, with plain object text (dtype spelling aside)."""
    out = df[["variable", "period", "release", "value"]].reset_index(drop=True)
    return out.astype({"variable": object, "period": object})


def refused(path: Path, *, line: int | None, field: str | None, says: str, **kw) -> InputError:
    """Read ``path`` and check the refusal: one line, pointing at file, line and field."""
    kw.setdefault("variables", MAP)
    if "release_column" not in kw:
        kw.setdefault("release", "2024-11-15")
    with pytest.raises(InputError) as info:
        read_sdmx_csv(path, **kw)
    err = info.value
    msg = str(err)
    assert "\n" not in msg and "\r" not in msg, msg
    assert (err.file, err.line, err.field) == (str(path), line, field), msg
    where = [str(path)] + ([f"line {line}"] if line is not None else []) + \
        ([f"field '{field}'"] if field is not None else [])
    assert msg.startswith(", ".join(where) + ": "), msg
    assert says in msg, msg
    return err


def q(year: int, quarter: int) -> pd.Period:
    return pd.Period(year=year, quarter=quarter, freq="Q")


def m(year: int, month: int) -> pd.Period:
    return pd.Period(year=year, month=month, freq="M")


# ---------------------------------------------------------------- happy paths


def test_v1_file_is_read_into_the_long_table(tmp_path):
    """An SDMX-CSV 1.0 file (shape of "Examples" 1) becomes the long table in file order."""
    p = write(tmp_path, "v1.csv", V1)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    want = expected([("gdp", q(2024, 2), "101.5"), ("gdp", q(2024, 3), "102.25"),
                     ("cpi", m(2024, 7), "2.1"), ("cpi", m(2024, 8), "2.3")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)
    assert got["_line"].tolist() == [line_of(V1, "2024-Q2"), line_of(V1, "2024-Q3"),
                                     line_of(V1, "2024-07"), line_of(V1, "2024-08")]
    assert got.attrs["source"] == str(p) and got.attrs["sdmx_csv_version"] == "1.0"
    assert got["release"].dtype == "datetime64[s]" and got["value"].dtype == np.float64


def test_v2_file_takes_release_day_from_a_named_custom_column(tmp_path):
    """An SDMX-CSV 2.0 file ("Ordinary case") takes each row's release day from its UPDATED cell."""
    p = write(tmp_path, "v2.csv", V2)
    got = read_sdmx_csv(p, variables=MAP, release_column="UPDATED")
    # The calendar day as written is kept: the +02:00 row is the 14th, not converted to UTC.
    want = expected([("gdp", q(2024, 2), "101.5", "2024-11-15"),
                     ("gdp", q(2024, 3), "102.25", "2024-11-15"),
                     ("cpi", m(2024, 7), "2.1", "2024-11-14")], "unused")
    pd.testing.assert_frame_equal(table(got), want)
    assert got.attrs["sdmx_csv_version"] == "2.0"


def test_v2_labels_both_with_semicolons_and_decimal_comma(tmp_path):
    """A labels=both 2.0 file with ';' separators and decimal commas ("Localisation") is read by code."""
    text = (
        "STRUCTURE[|];STRUCTURE_ID;ACTION;SERIES_KEY;OBS_KEY;REF_AREA: Zone de référence;"
        "INDICATOR: Indicateur;TIME_PERIOD: Période;OBS_VALUE: Valeur;OBS_STATUS: Statut\n"
        "dataflow;VMSO:NA_MAIN(1.0.0): Comptes nationaux du Veldmark;I;VM.GDP_R;VM.GDP_R.2024-Q3;"
        "VM: Veldmark;GDP_R: PIB réel;2024-Q3: 2024-T3;102,25;A: Normale\n"
        "dataflow;VMSO:NA_MAIN(1.0.0): Comptes nationaux du Veldmark;I;VM.CPI;VM.CPI.2024-07;"
        "VM: Veldmark;CPI: Prix à la consommation;2024-07: 2024-07;2,1;A: Normale\n")
    p = write(tmp_path, "v2_fr.csv", text)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    want = expected([("gdp", q(2024, 3), "102.25"), ("cpi", m(2024, 7), "2.1")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)


def test_v1_labels_both_with_normalized_days(tmp_path):
    """A labels=both 1.0 file with normalized days ("Examples" 4) reads each day as its period."""
    text = (
        "DATAFLOW,REF_AREA: Reference area,INDICATOR: Indicator,FREQ: Frequency,TIME_PERIOD,"
        "OBS_VALUE,OBS_STATUS: Observation status\n"
        "VMSO:NA_MAIN(1.0): Veldmark national accounts,VM: Veldmark,CPI: Consumer prices,"
        "M: Monthly,2024-07-01,2.1,A: Normal\n"
        "VMSO:NA_MAIN(1.0): Veldmark national accounts,VM: Veldmark,GDP_R: Real output,"
        "Q: Quarterly,2024-09-30,102.25,A: Normal\n")
    p = write(tmp_path, "v1_both.csv", text)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    # pandas' Period of a day is the reference for "the period containing it".
    want = expected([("cpi", pd.Period("2024-07-01", "M"), "2.1"),
                     ("gdp", pd.Period("2024-09-30", "Q"), "102.25")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)


def test_v2_labels_name_columns_are_ignored(tmp_path):
    """The name columns of labels=name (2.0 "Optional parameters") are skipped, IDs still read."""
    text = (
        "STRUCTURE,STRUCTURE_ID,STRUCTURE_NAME,ACTION,REF_AREA,Reference area,INDICATOR,Indicator,"
        "TIME_PERIOD,Time period,OBS_VALUE,Observation value,OBS_STATUS,Observation status\n"
        "dataflow,VMSO:NA_MAIN(1.0.0),Veldmark national accounts,I,VM,Veldmark,GDP_R,Real output,"
        "2024-Q3,2024-Q3,102.25,,A,Normal\n")
    p = write(tmp_path, "v2_name.csv", text)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    pd.testing.assert_frame_equal(table(got), expected([("gdp", q(2024, 3), "102.25")], "2024-11-15"))


def test_v2_components_in_any_order_and_a_chosen_measure(tmp_path):
    """Columns in any order with two measures (2.0 "Components in any order") read the named one."""
    text = (
        "STRUCTURE[;],STRUCTURE_ID,ACTION,OBS_VALUE1,OBS_VALUE2,ATTR_3,ATTR_1[],INDICATOR,REF_AREA,"
        "TIME_PERIOD\n"
        'dataflow,VMSO:NA_MAIN(1.0.0),I,12.4,12.5,"Normal, special and other values",X;Y,GDP_R,VM,'
        "2024-Q1\n"
        'dataflow,VMSO:NA_MAIN(1.0.0),I,10.8,10.9,"Normal, special and other values",X;Z,GDP_R,VM,'
        "2024-Q2\n")
    p = write(tmp_path, "v2_any.csv", text)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15", measure="OBS_VALUE2")
    want = expected([("gdp", q(2024, 1), "12.5"), ("gdp", q(2024, 2), "10.9")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)
    refused(p, line=1, field="OBS_VALUE", says="missing column OBS_VALUE")


def test_v2_without_action_column_is_information(tmp_path):
    """A 2.0 file without ACTION is read as "Information" (2.0 "Column headers (first row)")."""
    text = ("STRUCTURE,STRUCTURE_ID,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),VM,GDP_R,2024-Q3,102.25\n")
    got = read_sdmx_csv(write(tmp_path, "noact.csv", text), variables=MAP, release="2024-11-15")
    pd.testing.assert_frame_equal(table(got), expected([("gdp", q(2024, 3), "102.25")], "2024-11-15"))


def test_v2_append_and_replace_rows_are_observations(tmp_path):
    """Append (A) and Replace (R) rows ("Varying actions") are observations of this vintage."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE,OBS_STATUS\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),A,VM,GDP_R,2024-Q2,101.5,A\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),R,VM,GDP_R,2024-Q3,102.25,P\n")
    got = read_sdmx_csv(write(tmp_path, "acts.csv", text), variables=MAP, release="2024-11-15")
    want = expected([("gdp", q(2024, 2), "101.5"), ("gdp", q(2024, 3), "102.25")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)


@pytest.mark.parametrize(("label", "freq", "period"), [
    ("2024-Q3", "Q", q(2024, 3)),      # SDMX 2.1 TN 4.2: reporting quarter YYYY-Qq
    ("2024Q3", "Q", q(2024, 3)),       # common practice (not an SDMX form)
    ("2024-07", "M", m(2024, 7)),      # SDMX 2.1 TN 4.2.4: Gregorian year-month YYYY-MM
    ("2024-M07", "M", m(2024, 7)),     # SDMX 2.1 TN 4.2: reporting month YYYY-Mmm
    ("1969-Q4", "Q", q(1969, 4)),      # before the ordinals' origin: negative ordinal
    ("2024-08-15", "M", m(2024, 8)),   # SDMX-CSV 2.0 "Optional parameters": timeFormat=normalized
    ("2024-01-01", "Q", q(2024, 1)),
])
def test_time_period_formats(tmp_path, label, freq, period):
    """Each SDMX quarterly or monthly TIME_PERIOD form gives the project's label of that period."""
    ind = "GDP_R" if freq == "Q" else "CPI"
    text = ("DATAFLOW,REF_AREA,INDICATOR,FREQ,TIME_PERIOD,OBS_VALUE\n"
            f"VMSO:NA_MAIN(1.0),VM,{ind},{freq},{label},1.5\n")
    got = read_sdmx_csv(write(tmp_path, "t.csv", text), variables=MAP, release="2024-11-15")
    assert got["period"].tolist() == [str(period)]


def test_empty_observations_and_partial_key_rows_are_not_published(tmp_path):
    """Empty or NaN OBS_VALUE rows and partial-key attribute rows (2.0 "Mixing rows …") are dropped."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE,OBS_STATUS\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q2,101.5,A\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,,M\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q4,NaN,M\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,,GDP_R,,,P\n"
            "\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,CPI,2024-07,2.1,A\n")
    p = write(tmp_path, "gaps.csv", text)
    got = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    want = expected([("gdp", q(2024, 2), "101.5"), ("cpi", m(2024, 7), "2.1")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)
    assert got["_line"].tolist() == [2, line_of(text, "2024-07")]  # the blank line still counts


def test_quoted_line_break_is_counted_as_physical_lines(tmp_path):
    """A quoted attribute spanning lines (2.0 "Non-coded XHTML … line-breaks") keeps line numbers true."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE,COMMENT\n"
            'dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q2,101.5,"<p>A ""revised"" value with a line\n'
            'break</p>"\n'
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,1O2.25,\n")
    p = write(tmp_path, "xhtml.csv", text)
    refused(p, line=line_of(text, "1O2.25"), field="OBS_VALUE", says="'1O2.25' is not a number")


def test_skip_unmapped_drops_other_series(tmp_path):
    """With skip_unmapped, series outside the map (other areas, other indicators) are dropped."""
    text = V1 + ("VMSO:NA_MAIN(1.0),XK,GDP_R,Q,2024-Q3,7.0,A,VMD,XK.GDP_R.Q\n"
                 "VMSO:NA_MAIN(1.0),VM,UR,M,2024-07,5.5,A,PC,VM.UR.M\n")
    p = write(tmp_path, "more.csv", text)
    got = read_sdmx_csv(p, variables={"gdp": "REF_AREA=VM, INDICATOR=GDP_R"}, release="2024-11-15",
                        skip_unmapped=True)
    want = expected([("gdp", q(2024, 2), "101.5"), ("gdp", q(2024, 3), "102.25")], "2024-11-15")
    pd.testing.assert_frame_equal(table(got), want)


def test_map_keyed_by_selector_equals_map_keyed_by_variable(tmp_path):
    """A map keyed by selector strings, by variable, or by tables of codes reads the same rows."""
    p = write(tmp_path, "v1.csv", V1)
    a = read_sdmx_csv(p, variables=MAP, release="2024-11-15")
    b = read_sdmx_csv(p, variables={"REF_AREA=VM, INDICATOR=GDP_R": "gdp",
                                    "REF_AREA=VM,INDICATOR=CPI": "cpi"}, release="2024-11-15")
    c = read_sdmx_csv(p, variables={"gdp": {"REF_AREA": "VM", "INDICATOR": "GDP_R"},
                                    "cpi": {"INDICATOR": "CPI", "REF_AREA": "VM"}},
                      release="2024-11-15")
    pd.testing.assert_frame_equal(a, b)
    pd.testing.assert_frame_equal(a, c)


def test_toml_variable_map_forms(tmp_path):
    """A TOML map with selector strings, inline tables and sub-tables reads like the dict."""
    toml = ('# Veldmark statistics office\n[variables]\ngdp = "REF_AREA=VM, INDICATOR=GDP_R"\n'
            'cpi = { REF_AREA = "VM", INDICATOR = "CPI" }\n\n[variables.urate]\n'
            'REF_AREA = "VM"\nINDICATOR = "UR"\n')
    mp = write(tmp_path, "map.toml", toml)
    assert read_variable_map(mp) == [("gdp", {"REF_AREA": "VM", "INDICATOR": "GDP_R"}),
                                     ("cpi", {"REF_AREA": "VM", "INDICATOR": "CPI"}),
                                     ("urate", {"REF_AREA": "VM", "INDICATOR": "UR"})]
    p = write(tmp_path, "v1.csv", V1)
    pd.testing.assert_frame_equal(read_sdmx_csv(p, variables=mp, release="2024-11-15"),
                                  read_sdmx_csv(p, variables=MAP, release="2024-11-15"))


def test_release_history_in_one_file(tmp_path):
    """One period released on two days (a release column) is two releases, not a duplicate."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE,UPDATED\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,102.0,2024-10-30\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,102.25,2024-11-29\n")
    got = read_sdmx_csv(write(tmp_path, "hist.csv", text), variables=MAP, release_column="UPDATED")
    want = expected([("gdp", q(2024, 3), "102.0", "2024-10-30"),
                     ("gdp", q(2024, 3), "102.25", "2024-11-29")], "unused")
    pd.testing.assert_frame_equal(table(got), want)


def test_round_trip_validates_and_appends_to_a_fresh_store(tmp_path):
    """The returned table passes validate_table unchanged and reads back from a fresh store as written."""
    p = write(tmp_path, "v2.csv", V2)
    df = read_sdmx_csv(p, variables=MAP, release_column="UPDATED", source="vm-2024-11.csv")
    valid = validate_table(df)
    assert valid.attrs["source"] == "vm-2024-11.csv"
    assert valid.attrs["freqs"] == {"gdp": "Q", "cpi": "M"}
    st = VintageStore.init(tmp_path / "store")
    res = st.append(df)
    assert res.written == len(df) == 3
    log = st.read_log()[["variable", "period", "release", "value"]]
    order = ["variable", "period", "release"]
    pd.testing.assert_frame_equal(table(log.sort_values(order)),
                                  table(df.sort_values(order)))
    assert st.append(read_sdmx_csv(p, variables=MAP, release_column="UPDATED")).written == 0


# ---------------------------------------------------------------- refused: header and columns


def test_refuses_missing_time_period_in_a_labels_name_header(tmp_path):
    """A 1.0 labels=name header ("Examples" 3) has no TIME_PERIOD ID and is refused at line 1."""
    text = ("DATAFLOW;Reference area;Indicator;Time period;OBS_VALUE\n"
            "Veldmark national accounts;Veldmark;Real output;2024-Q3;102,25\n")
    p = write(tmp_path, "names.csv", text)
    refused(p, line=1, field="TIME_PERIOD", says="labels=name")


def test_refuses_missing_obs_value(tmp_path):
    """A file without the OBS_VALUE measure column is refused at the header."""
    p = write(tmp_path, "nomeasure.csv", V1.replace("OBS_VALUE", "OBS_VAL"))
    refused(p, line=1, field="OBS_VALUE", says="missing column OBS_VALUE")


def test_refuses_file_without_header_row(tmp_path):
    """A 1.0 file written with header=absent ("Examples" 2) cannot be read and says so at line 1."""
    text = "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024-Q3,102.25,A\n"
    p = write(tmp_path, "nohead.csv", text)
    refused(p, line=1, field="VMSO:NA_MAIN(1.0)", says="not an SDMX-CSV header")


def test_refuses_a_long_layout_file(tmp_path):
    """The project's own long layout is not SDMX-CSV and is refused at its first header cell."""
    p = write(tmp_path, "long.csv", "variable,period,release,value\ngdp,2024Q3,2024-11-15,1\n")
    refused(p, line=1, field="variable", says="DATAFLOW (SDMX-CSV 1.0) or STRUCTURE (2.0)")


def test_refuses_v2_header_without_structure_id(tmp_path):
    """A 2.0 header must carry STRUCTURE_ID second (2.0 "Column headers (first row)")."""
    p = write(tmp_path, "v2bad.csv", V2.replace("STRUCTURE_ID", "DATAFLOW_ID"))
    refused(p, line=1, field="DATAFLOW_ID", says="STRUCTURE_ID as second column",
            release_column="UPDATED")


def test_refuses_selector_on_a_column_the_file_lacks(tmp_path):
    """A map that selects on a dimension missing from the header is refused at line 1."""
    p = write(tmp_path, "v1.csv", V1)
    refused(p, line=1, field="ADJUSTMENT", says="selects on ADJUSTMENT",
            variables={"gdp": "REF_AREA=VM, INDICATOR=GDP_R, ADJUSTMENT=S"})


def test_refuses_release_column_not_in_header(tmp_path):
    """A release column named by the user but absent from the header is refused at line 1."""
    p = write(tmp_path, "v1.csv", V1)
    refused(p, line=1, field="UPDATED", says="release column 'UPDATED'", release_column="UPDATED")


def test_refuses_a_used_column_twice_in_the_header(tmp_path):
    """A header that names TIME_PERIOD twice is ambiguous and refused at line 1."""
    text = V1.replace("OBS_STATUS", "TIME_PERIOD", 1)
    refused(write(tmp_path, "dupcol.csv", text), line=1, field="TIME_PERIOD", says="appears twice")


def test_refuses_row_of_the_wrong_length(tmp_path):
    """A record with fewer fields than the header is refused (RFC 4180, section 2)."""
    text = V1 + "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024-Q4,103.0\n"
    p = write(tmp_path, "short.csv", text)
    refused(p, line=line_of(text, "2024-Q4"), field=None, says="row has 6 fields but the header has 9")


@pytest.mark.parametrize(("content", "says"), [
    (b"", "file is empty"),
    (b"DATAFLOW,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n", "no data rows"),
    (b"DATAFLOW,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\nVMSO:X(1.0),VM,GDP_R,2024-Q3,1\xff\n",
     "not UTF-8"),
])
def test_refuses_empty_or_unreadable_files(tmp_path, content, says):
    """An empty file, a header without rows and a non-UTF-8 byte are refused with one line."""
    p = write(tmp_path, "x.csv", content)
    line = 2 if b"\xff" in content else None
    refused(p, line=line, field=None, says=says)


# ---------------------------------------------------------------- refused: cells


def test_refuses_period_of_the_wrong_frequency_for_freq_dimension(tmp_path):
    """A monthly TIME_PERIOD on a FREQ=Q row is refused at that row's TIME_PERIOD."""
    text = V1.replace("GDP_R,Q,2024-Q3", "GDP_R,Q,2024-09")
    p = write(tmp_path, "wrongf.csv", text)
    refused(p, line=line_of(text, "2024-09"), field="TIME_PERIOD",
            says="'2024-09' is monthly but the series is quarterly (FREQ=Q)")


def test_refuses_period_of_the_wrong_frequency_for_freq_option(tmp_path):
    """Without a FREQ column, a quarterly TIME_PERIOD is refused when freq='M' was asked for."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            "dataflow,VMSO:PRICES(1.0.0),I,VM,CPI,2024-07,2.1\n"
            "dataflow,VMSO:PRICES(1.0.0),I,VM,CPI,2024-Q3,2.2\n")
    p = write(tmp_path, "opt.csv", text)
    refused(p, line=3, field="TIME_PERIOD", says="quarterly but the series is monthly (freq='M')",
            freq="M")


def test_refuses_freq_code_not_held(tmp_path):
    """An annual FREQ code (A) is refused at the FREQ field, listing the codes held."""
    text = V1.replace("GDP_R,Q,2024-Q2", "GDP_R,A,2024")
    p = write(tmp_path, "annual.csv", text)
    refused(p, line=2, field="FREQ", says="FREQ 'A' is not held; expected one of ['M', 'Q']")


def test_refuses_freq_contradicting_the_option(tmp_path):
    """A FREQ=M row is refused when freq='Q' was asked for."""
    p = write(tmp_path, "v1.csv", V1)
    refused(p, line=line_of(V1, "2024-07"), field="FREQ", says="FREQ is 'M' but freq='Q'", freq="Q")


def test_refuses_a_day_without_known_frequency(tmp_path):
    """A normalized day cannot be read as a period when neither FREQ nor freq= says which."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            "dataflow,VMSO:PRICES(1.0.0),I,VM,CPI,2024-07-01,2.1\n")
    p = write(tmp_path, "day.csv", text)
    refused(p, line=2, field="TIME_PERIOD", says="is a day (timeFormat=normalized)")


def test_refuses_a_variable_mixing_frequencies(tmp_path):
    """A variable whose rows are quarterly and monthly is refused at the first odd row."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,102.25\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-09,34.1\n")
    p = write(tmp_path, "mixed.csv", text)
    refused(p, line=3, field="TIME_PERIOD", says="mixes frequencies: monthly here, quarterly on line 2")


@pytest.mark.parametrize(("label", "says"), [
    ("2024", "annual (Gregorian year)"),              # SDMX 2.1 TN 4.2.4
    ("2024-A1", "annual (reporting year)"),           # SDMX 2.1 TN 4.2, reporting periods
    ("2024-S1", "half-yearly (reporting semester)"),
    ("2024-T2", "four-monthly (reporting trimester)"),
    ("2024-W05", "weekly (reporting week)"),
    ("2024-D045", "daily (reporting day)"),
    ("2024-07-01T00:00:00", "a date-time"),
    ("2024-07-01T00:00:00/P1M", "a time range"),
    ("2024-13", "is not an SDMX time period"),
    ("July 2024", "is not an SDMX time period"),
    ("2024-02-30", "is not a calendar day"),
    ("", "blank TIME_PERIOD"),
])
def test_refuses_time_periods_not_held(tmp_path, label, says):
    """A TIME_PERIOD that is not a quarter or a month is refused by name at its cell."""
    text = ("DATAFLOW,REF_AREA,INDICATOR,FREQ,TIME_PERIOD,OBS_VALUE\n"
            "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024-Q1,100.0\n"
            f"VMSO:NA_MAIN(1.0),VM,GDP_R,Q,{label},101.0\n")
    refused(write(tmp_path, "t.csv", text), line=3, field="TIME_PERIOD", says=says)


def test_refuses_non_calendar_reporting_year(tmp_path):
    """A reporting quarter with REPORTING_YEAR_START_DAY --07-01 (SDMX 2.1 TN 4.2 example) is refused."""
    text = ("DATAFLOW,REF_AREA,INDICATOR,FREQ,TIME_PERIOD,OBS_VALUE,REPORTING_YEAR_START_DAY\n"
            "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2010-Q1,99.0,--01-01\n"
            "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2010-Q2,100.0,--07-01\n")
    p = write(tmp_path, "fiscal.csv", text)
    refused(p, line=3, field="REPORTING_YEAR_START_DAY", says="starts '--07-01'")


def test_refuses_duplicate_observation(tmp_path):
    """The same variable and period twice in one vintage is refused at the second, naming the first."""
    text = V1 + "VMSO:NA_MAIN(1.0),VM,GDP_R,Q,2024Q3,102.25,A,VMD,VM.GDP_R.Q\n"
    p = write(tmp_path, "dup.csv", text)
    refused(p, line=line_of(text, ",2024Q3,"), field="TIME_PERIOD",
            says=f"duplicate observation: gdp 2024Q3 released 2024-11-15 is also on line "
                 f"{line_of(text, '2024-Q3')}")


def test_refuses_unknown_dimension_code(tmp_path):
    """A code the map does not know (REF_AREA=XK) is refused at its cell, listing the known codes."""
    text = V1 + "VMSO:NA_MAIN(1.0),XK,GDP_R,Q,2024-Q3,7.0,A,VMD,XK.GDP_R.Q\n"
    p = write(tmp_path, "xk.csv", text)
    refused(p, line=line_of(text, "XK"), field="REF_AREA",
            says="unknown code 'XK' in REF_AREA: the variable map knows ['VM']")


def test_unknown_codes_in_two_dimensions_name_the_first_column(tmp_path):
    """A row with unknown codes in two dimensions is refused at the one that comes first in the header."""
    text = V1 + "VMSO:NA_MAIN(1.0),XK,EMP,Q,2024-Q3,7.0,A,VMD,XK.EMP.Q\n"
    p = write(tmp_path, "xk2.csv", text)
    refused(p, line=line_of(text, "XK"), field="REF_AREA", says="unknown code 'XK' in REF_AREA")
    swapped = text.replace("REF_AREA,INDICATOR", "INDICATOR,REF_AREA").replace("VM,GDP_R", "GDP_R,VM")
    swapped = swapped.replace("VM,CPI", "CPI,VM").replace("XK,EMP", "EMP,XK")
    p2 = write(tmp_path, "xk3.csv", swapped)
    refused(p2, line=line_of(swapped, "XK"), field="INDICATOR", says="unknown code 'EMP' in INDICATOR")


def test_refuses_unmapped_combination_of_known_codes(tmp_path):
    """Known codes in a combination no variable selects are refused, naming the series key."""
    mp = {"gdp": "REF_AREA=VM, INDICATOR=GDP_R, FREQ=Q", "cpi": "REF_AREA=VM, INDICATOR=CPI, FREQ=M"}
    text = V1 + "VMSO:NA_MAIN(1.0),VM,GDP_R,M,2024-07,34.0,A,VMD,VM.GDP_R.M\n"
    p = write(tmp_path, "combo.csv", text)
    refused(p, line=line_of(text, "GDP_R,M"), field="REF_AREA", variables=mp,
            says="no variable is mapped to this series (REF_AREA=VM, INDICATOR=GDP_R, FREQ=M)")


def test_refuses_row_matching_two_variables(tmp_path):
    """Overlapping selectors that both match a row are refused, naming both variables."""
    mp = {"gdp": "INDICATOR=GDP_R", "vm_gdp": "REF_AREA=VM, INDICATOR=GDP_R",
          "cpi": "INDICATOR=CPI"}
    p = write(tmp_path, "v1.csv", V1)
    refused(p, line=2, field="REF_AREA", variables=mp, says="matches 2 variables of the map: "
            "['gdp', 'vm_gdp']")


@pytest.mark.parametrize("cell", ["abc", "1.0.2", "12,4", "INF", "-inf"])
def test_refuses_non_numeric_or_infinite_value(tmp_path, cell):
    """An OBS_VALUE that is not a finite number is refused at its cell."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q2,101.5\n"
            f'dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q3,"{cell}"\n')
    p = write(tmp_path, "val.csv", text)
    refused(p, line=3, field="OBS_VALUE", says=f"value {cell!r} is not")


def test_refuses_decimal_comma_with_thousands_point(tmp_path):
    """In a ';' file a value with both '.' and ',' is refused rather than guessed."""
    text = ("STRUCTURE;STRUCTURE_ID;ACTION;REF_AREA;INDICATOR;TIME_PERIOD;OBS_VALUE\n"
            "dataflow;VMSO:NA_MAIN(1.0.0);I;VM;GDP_R;2024-Q3;1.234,5\n")
    refused(write(tmp_path, "semi.csv", text), line=2, field="OBS_VALUE", says="'1.234,5' is not a number")


@pytest.mark.parametrize(("cell", "says"), [
    ("2024-02-30", "'2024-02-30' is not an ISO 8601 date"),
    ("15/11/2024", "'15/11/2024' is not an ISO 8601 date"),
    ("2024-11", "'2024-11' is not an ISO 8601 date"),
    ("", "blank release date"),
])
def test_refuses_bad_date_in_release_column(tmp_path, cell, says):
    """A release cell that is not an ISO 8601 calendar day is refused at that cell."""
    head, first, second, third = V2.splitlines(keepends=True)
    text = head + first + second.replace("2024-11-15T09:30:00Z", cell) + third
    p = write(tmp_path, "rel.csv", text)
    refused(p, line=3, field="UPDATED", says=says, release_column="UPDATED")


def test_refuses_delete_rows(tmp_path):
    """A Delete row (2.0 "Deleting specific measure and attribute values") is refused at ACTION."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE,OBS_STATUS\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),I,VM,GDP_R,2024-Q2,101.5,A\n"
            "dataflow,VMSO:NA_MAIN(1.0.0),D,VM,GDP_R,2024-Q3,-,\n")
    refused(write(tmp_path, "del.csv", text), line=3, field="ACTION", says="Delete (D) row")


@pytest.mark.parametrize("cell", ["X", "", "i"])
def test_refuses_unknown_action(tmp_path, cell):
    """An ACTION other than I, A, R or D is refused at its cell."""
    text = ("STRUCTURE,STRUCTURE_ID,ACTION,REF_AREA,INDICATOR,TIME_PERIOD,OBS_VALUE\n"
            f"dataflow,VMSO:NA_MAIN(1.0.0),{cell},VM,GDP_R,2024-Q3,102.25\n")
    refused(write(tmp_path, "act.csv", text), line=2, field="ACTION",
            says=f"unknown ACTION {cell!r}; expected one of ['A', 'D', 'I', 'R']")


def test_first_bad_row_in_the_file_is_named(tmp_path):
    """Of two bad rows of different kinds, the error names the earlier one."""
    text = V1.replace("102.25", "n/a").replace(",VM,CPI,M,2024-08", ",XK,CPI,M,2024-08")
    p = write(tmp_path, "two.csv", text)
    refused(p, line=line_of(text, "n/a"), field="OBS_VALUE", says="'n/a' is not a number")


# ---------------------------------------------------------------- refused: options and the map


@pytest.mark.parametrize(("kw", "says"), [
    ({}, "give the release date either as release="),
    ({"release": "2024-11-15", "release_column": "UPDATED"}, "give the release date either"),
    ({"release": "15.11.2024"}, "release='15.11.2024' is not a date YYYY-MM-DD"),
    ({"release": "2024-02-30"}, "release='2024-02-30' is not a date YYYY-MM-DD"),
    ({"release": "2024-11-15", "freq": "A"}, "unknown frequency 'A'"),
])
def test_refuses_bad_options(tmp_path, kw, says):
    """A missing, doubled or malformed release option, or an unknown freq, is refused by name."""
    p = write(tmp_path, "v1.csv", V1)
    with pytest.raises(InputError) as info:
        read_sdmx_csv(p, variables=MAP, **kw)
    assert says in str(info.value) and info.value.file == str(p)


@pytest.mark.parametrize(("toml", "line", "field", "says"), [
    ('[variables]\ngdp = "REF_AREA=VM, INDICATOR=GDP_R"\n2cpi = "INDICATOR=CPI"\n',
     3, "2cpi", "not a safe identifier"),
    ('[variables]\ngdp = "REF_AREA=VM, INDICATOR=GDP_R"\ncpi = "INDICATOR"\n',
     3, "cpi", "is not DIMENSION=CODE"),
    ('[variables]\ngdp = "INDICATOR=GDP_R"\nrgdp = { INDICATOR = "GDP_R" }\n',
     3, "rgdp", "same selector INDICATOR=GDP_R"),
    ('[variables]\ngdp = { REF_AREA = "VM", UNIT_MULT = 6 }\n', 2, "gdp", "must be text (quote it)"),
    ('[variables]\n\n[variables.gdp]\n', 3, "gdp", "empty selector"),
    ('[variables]\ngdp = "REF_AREA=VM"\n[options]\nskip = true\n', 3, "options",
     "unknown top-level key 'options'"),
    ('gdp = "REF_AREA=VM"\n', 1, "gdp", "unknown top-level key 'gdp'"),
    ('# nothing mapped yet\n[variables]\n', 2, None, "needs a non-empty [variables] table"),
    ('[variables]\ngdp = "REF_AREA=VM\n', 2, None, "not valid TOML"),
])
def test_refuses_bad_variable_map_file(tmp_path, toml, line, field, says):
    """A malformed TOML map is refused naming the map file, the line of the key and the variable."""
    mp = write(tmp_path, "map.toml", toml)
    p = write(tmp_path, "v1.csv", V1)
    with pytest.raises(InputError) as info:
        read_sdmx_csv(p, variables=mp, release="2024-11-15")
    err = info.value
    assert (err.file, err.line, err.field) == (str(mp), line, field), str(err)
    assert says in str(err) and "\n" not in str(err)


def test_refuses_bad_variable_map_dict(tmp_path):
    """A dict map with an unsafe name or a selector with spaces inside a code is refused by name."""
    p = write(tmp_path, "v1.csv", V1)
    with pytest.raises(InputError, match="not a safe identifier"):
        read_sdmx_csv(p, variables={"real gdp": "INDICATOR=GDP_R"}, release="2024-11-15")
    with pytest.raises(InputError, match="without spaces"):
        read_sdmx_csv(p, variables={"gdp": "INDICATOR=GDP R"}, release="2024-11-15")
    with pytest.raises(InputError, match="the variable map is empty"):
        read_sdmx_csv(p, variables={}, release="2024-11-15")


# --------------------------------------------------------------------------- the command line
def _cli_store(tmp_path):
    from typer.testing import CliRunner

    from harness.cli import app

    store = tmp_path / "store"
    VintageStore.init(store)
    mp = write(tmp_path, "map.toml", '[variables]\ngdp = "REF_AREA=VM, INDICATOR=GDP_R"\n'
                                     'cpi = "REF_AREA=VM, INDICATOR=CPI"\n')
    return CliRunner(), app, store, mp


def _digest(root: Path) -> dict:
    import hashlib

    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def test_cli_ingests_sdmx_csv_one_file_per_vintage(tmp_path):
    """``ingest --layout sdmx-csv --map --release`` appends a vintage per file (SDMX-CSV 1.0, Examples 1)."""
    runner, app, store, mp = _cli_store(tmp_path)
    f1 = write(tmp_path, "v1.csv", V1)
    f2 = write(tmp_path, "v2.csv", V1.replace("102.25", "102.5"))
    for f, day in ((f1, "2024-11-15"), (f2, "2024-12-15")):
        res = runner.invoke(app, ["vintages", "ingest", str(store), str(f), "--layout", "sdmx-csv",
                                  "--map", str(mp), "--release", day])
        assert res.exit_code == 0, res.output
    cube = VintageStore(store).cube()
    assert cube.asof("2024-11-30")["gdp"].loc["2024Q3"] == 102.25
    assert cube.asof("2024-12-31")["gdp"].loc["2024Q3"] == 102.5


@pytest.mark.parametrize("body,needle", [
    (V1.replace("TIME_PERIOD", "PERIOD"), "TIME_PERIOD"),
    (V1.replace("VM,GDP_R,Q,2024-Q2", "VM,GDP_R,Q,2024-07"), "is monthly but the series is quarterly"),
    (V1 + "VMSO:NA_MAIN(1.0),VM,CPI,M,2024-08,2.4,A,PC,VM.CPI.M\n", "duplicate"),
    (V1.replace("VM,CPI,M,2024-08", "VM,CPIX,M,2024-08"), "CPIX"),
])
def test_cli_refuses_bad_sdmx_with_one_line_and_leaves_the_store(tmp_path, body, needle):
    """Missing TIME_PERIOD, wrong frequency, duplicate keys, unknown dimension values: exit 1, store unchanged.

    Cases follow SDMX-CSV 1.0 "Design principles" (one observation per row, TIME_PERIOD and
    OBS_VALUE columns) and SDMX 2.1 TN 4.2 (time formats per frequency).
    """
    runner, app, store, mp = _cli_store(tmp_path)
    before = _digest(store)
    f = write(tmp_path, "bad.csv", body)
    res = runner.invoke(app, ["vintages", "ingest", str(store), str(f), "--layout", "sdmx-csv",
                              "--map", str(mp), "--release", "2024-11-15"])
    assert res.exit_code == 1, res.output
    errs = [ln for ln in res.output.splitlines() if ln.startswith("error:")]
    assert len(errs) == 1 and needle in errs[0] and str(f) in errs[0]
    assert _digest(store) == before


def test_cli_sdmx_needs_a_map_and_one_release_source(tmp_path):
    """Without --map, or with both --release and --release-column, the command is a usage error (exit 2)."""
    runner, app, store, mp = _cli_store(tmp_path)
    f = write(tmp_path, "v1.csv", V1)
    assert runner.invoke(app, ["vintages", "ingest", str(store), str(f), "--layout", "sdmx-csv",
                               "--release", "2024-11-15"]).exit_code == 2
    assert runner.invoke(app, ["vintages", "ingest", str(store), str(f), "--layout", "sdmx-csv", "--map",
                               str(mp), "--release", "2024-11-15", "--release-column", "X"]).exit_code == 2
