"""``harness vintages …``: create a store, ingest release files, inspect what was known when."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import echo_table, fail, friendly

app = typer.Typer(no_args_is_help=True, add_completion=False)


class LayoutOpt(str, Enum):
    long = "long"
    triangle = "triangle"


class FreqOpt(str, Enum):
    Q = "Q"
    M = "M"


class TableFormat(str, Enum):
    table = "table"
    csv = "csv"


class ExportFormat(str, Enum):
    csv = "csv"
    parquet = "parquet"


StoreArg = Annotated[Path, typer.Argument(help="Path of the vintage store directory.")]


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
                                              "triangle: one variable, rows periods, columns release dates.")] = LayoutOpt.long,
    variable: Annotated[str | None, typer.Option(help="Variable held by a triangle file.")] = None,
    freq: Annotated[FreqOpt | None, typer.Option(help="Frequency of a new variable (checked against the periods).")] = None,
    units: Annotated[str | None, typer.Option(help="Units of a new variable.")] = None,
    description: Annotated[str | None, typer.Option(help="Description of a new variable.")] = None,
    supersede: Annotated[bool, typer.Option("--supersede", help="Allow replacing values already published for the same "
                                            "(variable, period, release); the old values stay in the log with an audit record.")] = False,
    reason: Annotated[str | None, typer.Option(help="Reason recorded in the audit trail with --supersede.")] = None,
    allow_early: Annotated[bool, typer.Option("--allow-early", help="Accept release dates on or before the end of the "
                                              "reference period (forecasts-as-data, e.g. survey expectations).")] = False,
) -> None:
    """Validate release files and append them to STORE, one atomic batch per file.

    Every file is validated completely before anything is written; an invalid file leaves the
    store untouched and the command stops with a one-line error naming file, line and field.
    """
    from vintages import VintageStore, read_releases, validate_table

    if layout is LayoutOpt.triangle and not variable:
        fail("a triangle holds one variable: name it with --variable NAME", code=2)
    st = VintageStore(store)
    known = st.variables
    given = {k: v for k, v in (("freq", freq.value if freq else None), ("units", units),
                                ("description", description)) if v is not None}
    tables = []
    for f in files:  # validate every file first: either all are appended or none
        t = read_releases(f, layout=layout.value, variable=variable, freq=given.get("freq"))
        meta = {n: dict(given) for n in set(t["variable"].astype(str))} if given else {}
        validate_table(t, known=known, new_meta=meta, source=str(f), allow_early=allow_early)
        tables.append((f, t, meta))
    for f, t, meta in tables:
        res = st.append(t, meta, supersede=supersede, source=str(f), reason=reason, allow_early=allow_early)
        typer.echo(f"{f}: {res.summary()}")


@app.command("info")
@friendly
def info_cmd(store: StoreArg) -> None:
    """Summarise STORE: variables, frequencies, periods and releases held, checksum."""
    from vintages import VintageStore

    st = VintageStore(store)
    m = st.manifest()
    problems = st.verify()
    typer.echo(f"store {store}: {len(m['variables'])} variables, {len(m['batches'])} batches, "
               f"{len(m['audit'])} superseded values; checksum {st.checksum()[:16]}")
    echo_table(st.info().drop(columns=["description"], errors="ignore"))
    if problems:
        for p in problems:
            typer.echo(f"problem: {p}", err=True)
        raise typer.Exit(code=1)


@app.command("asof")
@friendly
def asof_cmd(
    store: StoreArg,
    date: Annotated[str, typer.Argument(help="Calendar day YYYY-MM-DD: show what was known on that day.")],
    variable: Annotated[list[str] | None, typer.Option(help="Only these variables (repeatable).")] = None,
    fmt: Annotated[TableFormat, typer.Option("--format", help="table or csv (variable,period,value).")] = TableFormat.table,
    release: Annotated[bool, typer.Option("--with-release", help="Add the release date each value comes from.")] = False,
) -> None:
    """Print the information known on DATE: each value's latest release on or before that day."""
    import pandas as pd

    from vintages import VintageStore

    try:
        day = pd.Timestamp(date)
    except ValueError:
        fail(f"cannot parse date {date!r}; expected YYYY-MM-DD", code=2)
    cube = VintageStore(store).cube(variables=variable or None)
    df = cube.asof(day).to_frame()
    cols = ["variable", "period", "value"] + (["release"] if release else [])
    if fmt is TableFormat.table:
        last = df.groupby("variable", sort=True).agg(last_period=("period", "last"), last_release=("release", "max"),
                                                      values=("value", "size")).reset_index()
        typer.echo(f"known on {day.date()}: ragged edge")
        echo_table(last)
        typer.echo("")
    echo_table(df[cols], fmt.value)


@app.command("export")
@friendly
def export_cmd(
    store: StoreArg,
    out: Annotated[Path, typer.Argument(help="Output file.")],
    fmt: Annotated[ExportFormat, typer.Option("--format", help="csv or parquet long table.")] = ExportFormat.csv,
    superseded: Annotated[bool, typer.Option("--with-superseded", help="Include superseded values (audit).")] = False,
) -> None:
    """Export the whole release log as a long table (variable, period, release, value, batch)."""
    from vintages import VintageStore

    log = VintageStore(store).read_log(with_superseded=superseded)
    log["release"] = log["release"].dt.strftime("%Y-%m-%d")
    tmp = out.with_name(out.name + ".tmp")
    if fmt is ExportFormat.csv:
        log.to_csv(tmp, index=False)
    else:
        log.to_parquet(tmp, index=False)
    tmp.replace(out)
    typer.echo(f"wrote {len(log)} rows to {out}")


@app.command("revisions")
@friendly
def revisions_cmd(
    store: StoreArg,
    variable: Annotated[str, typer.Argument(help="Variable to analyse.")],
    frm: Annotated[str, typer.Option("--from", help="Earlier estimate: first, release:K, lag:NNND.")] = "first",
    to: Annotated[str, typer.Option("--to", help="Later estimate: latest, release:K, lag:NNND, asof:DATE.")] = "latest",
    transform: Annotated[str | None, typer.Option(help="Transformation inside each vintage (level, diff, dlog, "
                                                  "dlog_ann, yoy); default: dlog_ann for an index, level for a rate.")] = None,
    fmt: Annotated[TableFormat, typer.Option("--format", help="table or csv.")] = TableFormat.table,
) -> None:
    """Revision statistics and news-versus-noise regressions for VARIABLE between two estimates."""
    from vintages import VintageStore, revisions_table

    table = revisions_table(VintageStore(store).cube(), variable, transform=transform, frm=frm, to=to)
    if fmt is TableFormat.csv:
        echo_table(table, "csv")
        return
    typer.echo(f"Revisions of {variable} from '{frm}' to '{to}' (news vs noise: Mankiw & Shapiro 1986; "
               "noise slope = revision on the later estimate, news slope = revision on the earlier one; "
               "HAC standard errors)")
    typer.echo(table.set_index("variable").T.to_string())
