"""``vintage-harness vintages …``: create a store, ingest release files, inspect what was known when.

Exit codes of these commands: 0 success; 1 data or input error (a bad file, a conflict, a
corrupt store, an unsound ``verify``); 2 usage error (bad option or argument); 3 another
writer holds the store's lock: retry when it has finished.
"""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import USAGE_ERROR, fail, friendly, output_format

app = typer.Typer(no_args_is_help=True, add_completion=False)


class LayoutOpt(str, Enum):
    long = "long"
    triangle = "triangle"
    sdmx_csv = "sdmx-csv"


class FreqOpt(str, Enum):
    Q = "Q"
    M = "M"


class TableFormat(str, Enum):
    text = "text"
    md = "md"
    tex = "tex"
    csv = "csv"
    parquet = "parquet"
    table = "table"  # the earlier name of text, kept for scripts


_FORMAT_HELP = ("text (aligned, ready to paste), md, tex, csv or parquet (to a file only); default: from the "
                "--out suffix, else text.")
OutOpt = Annotated[Path | None, typer.Option(help="Write the table to this file (atomically) instead of the "
                                             "terminal.")]


_fmt = output_format

class ExportFormat(str, Enum):
    csv = "csv"
    parquet = "parquet"


StoreArg = Annotated[Path, typer.Argument(help="Path of the vintage store directory.")]


def _notes(st, m) -> None:
    """Notes on stderr: an older store format, files left by interrupted writes."""
    note = st.format_note(m)
    if note:
        typer.echo(f"note: {note}", err=True)
    orphans = st.orphans()
    if orphans:
        shown = ", ".join(orphans[:5]) + (f", … ({len(orphans)} in all)" if len(orphans) > 5 else "")
        typer.echo(f"note: {len(orphans)} file(s) not listed by the manifest (left by interrupted writes or "
                   f"put there by hand): {shown}; see 'vintage-harness vintages cleanup {st.path}'", err=True)


@app.command("init")
@friendly
def init_cmd(store: StoreArg) -> None:
    """Create an empty vintage store at STORE."""
    from vintages import VintageStore

    VintageStore.init(store)
    typer.echo(f"created empty vintage store at {store}")


@app.command("ingest")
@friendly
def ingest_cmd(
    store: StoreArg,
    files: Annotated[list[Path], typer.Argument(help="Release files (CSV or Parquet).")],
    layout: Annotated[LayoutOpt, typer.Option(help="long: variable,period,release,value rows; "
                                              "triangle: one variable, rows periods, columns release dates; "
                                              "sdmx-csv: SDMX-CSV 1.0 or 2.0 (needs --map and --release "
                                              "or --release-column).")] = LayoutOpt.long,
    sdmx_map: Annotated[Path | None, typer.Option("--map", help="sdmx-csv: TOML file mapping dimension values "
                                                  "to variable names, e.g. gdp = \"REF_AREA=VM, INDICATOR=GDP\".")] = None,
    release: Annotated[str | None, typer.Option(help="sdmx-csv: the release date (YYYY-MM-DD) of every value "
                                                "in the file.")] = None,
    release_column: Annotated[str | None, typer.Option(help="sdmx-csv: the column holding each value's "
                                                       "release date.")] = None,
    skip_unmapped: Annotated[bool, typer.Option("--skip-unmapped", help="sdmx-csv: ignore rows the map does "
                                                "not name (default: refuse them).")] = False,
    variable: Annotated[str | None, typer.Option(help="Variable held by a triangle file.")] = None,
    freq: Annotated[FreqOpt | None, typer.Option(help="Frequency of a new variable (checked against the periods).")] = None,
    units: Annotated[str | None, typer.Option(help="Units of a new variable (a known variable's units change "
                                              "only with 'describe').")] = None,
    description: Annotated[str | None, typer.Option(help="Description of a new variable (change a known one's "
                                                    "with 'describe').")] = None,
    supersede: Annotated[bool, typer.Option("--supersede", help="Allow replacing values already published for the same "
                                            "(variable, period, release); the old values stay in the log with an audit record.")] = False,
    reason: Annotated[str | None, typer.Option(help="Reason recorded in the audit trail with --supersede.")] = None,
    allow_early: Annotated[bool, typer.Option("--allow-early", help="Accept release dates on or before the end of the "
                                              "reference period (forecasts-as-data, e.g. survey expectations).")] = False,
    allow_future: Annotated[bool, typer.Option("--allow-future", help="Accept release dates more than a year after "
                                               "today (e.g. a published release calendar).")] = False,
) -> None:
    """Validate release files and append them to STORE, all of them or none.

    Every file is validated against the store and against the files before it on the command
    line (frequencies, values of the same cell, metadata), then all are committed in one step,
    one batch file per file with new values. An invalid file leaves the store byte-identical
    and the command stops with a one-line error naming file, line and field.

    Periods: 2024Q3 or 2024-07 (ASCII digits, years 1800-2200); releases: YYYY-MM-DD, at most
    a year after today unless --allow-future; values: finite numbers.
    """
    from vintages import VintageStore, read_releases

    if layout is LayoutOpt.triangle and not variable:
        fail("a triangle holds one variable: name it with --variable NAME", code=USAGE_ERROR)
    if layout is LayoutOpt.sdmx_csv and (sdmx_map is None or (release is None) == (release_column is None)):
        fail("an SDMX-CSV file needs --map FILE and exactly one of --release DATE or --release-column COL",
             code=USAGE_ERROR)
    st = VintageStore(store)
    given = {k: v for k, v in (("freq", freq.value if freq else None), ("units", units),
                                ("description", description)) if v is not None}
    items = []
    for f in files:  # read every file first; append_many validates them all before writing
        t = read_releases(f, layout=layout.value, variable=variable, freq=given.get("freq"),
                          sdmx_map=sdmx_map, release=release, release_column=release_column,
                          skip_unmapped=skip_unmapped)
        meta = {n: dict(given) for n in set(t["variable"].astype(str))} if given else {}
        items.append((t, meta, str(f)))
    results = st.append_many(items, supersede=supersede, reason=reason, allow_early=allow_early,
                             allow_future=allow_future)
    for f, res in zip(files, results, strict=True):
        for w in res.warnings:
            typer.echo(f"warning: {f}: {w}", err=True)
        typer.echo(f"{f}: {res.summary()}")


@app.command("info")
@friendly
def info_cmd(
    store: StoreArg,
    fmt: Annotated[TableFormat | None, typer.Option("--format", help=_FORMAT_HELP)] = None,
    out: OutOpt = None,
) -> None:
    """Summarise STORE: variables, frequencies, periods and releases held, checksum.

    Reading verifies the manifest and every batch file's checksum (a mismatch stops with exit
    1); files the manifest does not list are shown as notes.
    """
    from harness.report.textout import emit, frame_table
    from vintages import VintageStore

    f = _fmt(fmt, out)
    st = VintageStore(store)
    m = st.manifest()
    table = st.info()
    head = (f"store {store}: {len(m['variables'])} variables, {len(m['batches'])} batches, "
            f"{len(m['audit'])} superseded values; checksum {st.checksum()[:16]}")
    if f == "text":
        table = table.drop(columns=["description"], errors="ignore")
    emit([frame_table(table, head, name="store_info")], f, out, caution=False)
    _notes(st, m)


@app.command("verify")
@friendly
def verify_cmd(store: StoreArg) -> None:
    """Check STORE completely: manifest checksum and batch chain, every file's checksum and rows.

    Exit 0 when the store is sound, 1 when not (each problem on its own line). Files the
    manifest does not list are shown as notes; they do not make the store unsound.
    """
    from vintages import VintageStore

    st = VintageStore(store)
    problems = st.verify()
    if problems:
        for p in problems:
            typer.echo(f"problem: {p}", err=True)
        fail(f"{store}: {len(problems)} problem(s) found; the store is not sound")
    m = st.manifest()
    rows = sum(int(b["rows"]) for b in m["batches"])
    typer.echo(f"store {store} is sound: {len(m['batches'])} batch files ({rows} rows) match their checksums; "
               f"manifest checksum and batch chain {'verified' if st.format_note(m) is None else 'absent'}")
    _notes(st, m)


@app.command("cleanup")
@friendly
def cleanup_cmd(
    store: StoreArg,
    apply: Annotated[bool, typer.Option("--apply", help="Remove the files (without it: a dry run that only lists them).")] = False,
) -> None:
    """List, and with --apply remove, files interrupted writes left in STORE.

    A dry run by default. Only temporary files and batch files the manifest does not list are
    removed; a listed file never is, and other files are reported and left alone. Takes the
    writer's lock (exit 3 while another writer works).
    """
    from vintages import VintageStore

    res = VintageStore(store).cleanup(apply=apply)
    for rel in res.removable:
        typer.echo(f"{'removed' if rel in res.removed else 'would remove'} {rel}")
    for rel in res.kept:
        typer.echo(f"left alone (not written by the store) {rel}", err=True)
    typer.echo(res.summary())


@app.command("describe")
@friendly
def describe_cmd(
    store: StoreArg,
    variable: Annotated[str, typer.Argument(help="Variable whose metadata change.")],
    units: Annotated[str | None, typer.Option(help="New units.")] = None,
    description: Annotated[str | None, typer.Option(help="New description.")] = None,
    transform_hint: Annotated[str | None, typer.Option("--transform-hint", help="Transformation that makes the "
                                                       "series stationary (default of 'revisions'); '' removes it.")] = None,
    reason: Annotated[str | None, typer.Option(help="Why, kept in the audit record.")] = None,
) -> None:
    """Change VARIABLE's units, description or transform hint; the manifest keeps the old and new value."""
    from vintages import VintageStore, transform_names

    if units is None and description is None and transform_hint is None:
        fail("nothing to change: give --units, --description or --transform-hint", code=USAGE_ERROR)
    if transform_hint and transform_hint not in transform_names():
        fail(f"unknown --transform-hint {transform_hint!r}; expected one of {transform_names()} "
             "(or '' to remove it)", code=USAGE_ERROR)
    records = VintageStore(store).describe(variable, units=units, description=description,
                                           transform_hint=transform_hint, reason=reason)
    if not records:
        typer.echo(f"{variable}: nothing changed (the values given are already recorded)")
    for r in records:
        typer.echo(f"{variable}: {r['field']} {r['old']!r} -> {r['new']!r}")


@app.command("asof")
@friendly
def asof_cmd(
    store: StoreArg,
    date: Annotated[str, typer.Argument(help="Calendar day YYYY-MM-DD: show what was known on that day.")],
    variable: Annotated[list[str] | None, typer.Option(help="Only these variables (repeatable).")] = None,
    fmt: Annotated[TableFormat | None, typer.Option("--format", help=_FORMAT_HELP + " CSV and Parquet hold every "
                                                    "value (variable, period, value).")] = None,
    release: Annotated[bool, typer.Option("--with-release", help="Add the release date each value comes from.")] = False,
    every: Annotated[bool, typer.Option("--all", help="Every value known that day, not the summary (text, md, "
                                        "tex).")] = False,
    out: OutOpt = None,
) -> None:
    """What was known on DATE: per variable its last period and release (the ragged edge); --all for every value."""
    import pandas as pd

    from harness.report.textout import emit, frame_table
    from vintages import VintageStore

    f = _fmt(fmt, out)
    try:
        day = pd.Timestamp(date)
    except ValueError:
        fail(f"cannot parse date {date!r}; expected YYYY-MM-DD", code=USAGE_ERROR)
    cube = VintageStore(store).cube(variables=variable or None)
    df = cube.asof(day).to_frame()
    cols = ["variable", "period", "value"] + (["release"] if release else [])
    if f in ("csv", "parquet") or every:
        # data formats carry every value; the summary is for reading
        emit([frame_table(df[cols], f"known on {day.date()}: every value", name="asof")], f, out, caution=False)
        return
    last = df.groupby("variable", sort=True).agg(
        first_period=("period", "first"), last_period=("period", "last"), values=("value", "size"),
        last_release=("release", "max"), last_value=("value", "last")).reset_index()
    emit([frame_table(last, f"known on {day.date()}: the ragged edge (last period and release per variable; "
                      "--all for every value)", name="asof_summary")], f, out, caution=False)


@app.command("export")
@friendly
def export_cmd(
    store: StoreArg,
    out: Annotated[Path, typer.Argument(help="Output file (written atomically: never left half-written).")],
    fmt: Annotated[ExportFormat | None, typer.Option("--format", help="csv or parquet long table (default: from "
                                                     "the file's suffix, .csv or .parquet).")] = None,
    superseded: Annotated[bool, typer.Option("--with-superseded", help="Include superseded values (audit).")] = False,
) -> None:
    """Export the whole release log as a long table (variable, period, release, value, batch)."""
    from vintages import VintageStore

    by_suffix = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}.get(out.suffix.lower())
    if out.is_dir():  # refused by the store's writer as a data error, naming the folder
        by_suffix = fmt.value if fmt is not None else "csv"
    elif by_suffix is None:
        fail(f"{out}: unknown suffix {out.suffix!r}; the export is a .csv or .parquet file", code=USAGE_ERROR)
    if fmt is not None and fmt.value != by_suffix:
        fail(f"{out}: --format {fmt.value} does not match the file's suffix {out.suffix!r}", code=USAGE_ERROR)
    n = VintageStore(store).export(out, fmt=by_suffix, with_superseded=superseded)
    typer.echo(f"wrote {n} rows to {out}")


@app.command("revisions")
@friendly
def revisions_cmd(
    store: StoreArg,
    variables: Annotated[list[str], typer.Argument(metavar="VARIABLE...", help="Variables to analyse.")],
    frm: Annotated[str, typer.Option("--from", help="Earlier estimate: first, release:K, lag:NNND.")] = "first",
    to: Annotated[str, typer.Option("--to", help="Later estimate: latest, release:K, lag:NNND, asof:DATE.")] = "latest",
    transform: Annotated[str | None, typer.Option(help="Transformation inside each vintage (level, diff, dlog, "
                                                  "dlog_ann, yoy); default: the variable's transform hint "
                                                  "(see 'describe'), else dlog_ann for an index, level for a rate.")] = None,
    fmt: Annotated[TableFormat | None, typer.Option("--format", help=_FORMAT_HELP)] = None,
    out: OutOpt = None,
) -> None:
    """Revision statistics and news-versus-noise regressions between two estimates, with a one-line reading each."""
    import pandas as pd

    from harness.report.readings import revision_reading
    from harness.report.textout import emit, frame_table
    from vintages import VintageStore, revisions_table

    f = _fmt(fmt, out)
    st = VintageStore(store)
    cube = st.cube()
    rows = []
    for v in variables:
        tr = transform if transform is not None else ((st.variables.get(v) or {}).get("transform_hint") or None)
        rows.append(revisions_table(cube, v, transform=tr, frm=frm, to=to))
    table = pd.concat(rows, ignore_index=True)
    title = (f"Revisions from '{frm}' to '{to}' (news vs noise: Mankiw & Shapiro 1986; noise slope = revision on "
             "the later estimate, news slope = revision on the earlier one; HAC standard errors)")
    readings = [revision_reading(r) for r in table.to_dict("records")]
    if f in ("csv", "parquet"):
        emit([frame_table(table, title, name="revisions")], f, out, caution=False)
        return
    # statistics as rows, one column per variable, rounded to 3 significant digits for reading
    shown = table.set_index("variable").T
    shown = shown.map(lambda x: f"{x:.3g}" if isinstance(x, float) else str(x))
    shown = shown.reset_index().rename(columns={"index": "statistic"})
    shown.columns.name = None
    emit([frame_table(shown, title, name="revisions")], f, out, caution=False,
         extra_lines=["Reading (level 0.05):"] + [f"  {r}" for r in readings] if f in ("text", "md") else ())
