"""``vintage-harness cache …``: where the task cache is, what it holds, and cleaning it.

Exit codes: 0 success; 1 a data or input error; 2 a usage error; 3 a run is using the cache
(``clean`` never runs beside one): retry when it has finished.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import USAGE_ERROR, fail, friendly

app = typer.Typer(no_args_is_help=True, add_completion=False, rich_markup_mode=None)

CacheOpt = Annotated[Path | None, typer.Option("--cache", help="The cache directory (default: the spec's, "
                                               "else the store's, else $HARNESS_CACHE).")]
SpecOpt = Annotated[Path | None, typer.Option("--spec", help="A spec: use its task cache.")]
StoreOpt = Annotated[Path | None, typer.Option("--store", help="A vintage store: use the cache beside it "
                                               "(or $HARNESS_CACHE).")]


def _resolve(cache: Path | None, spec: Path | None, store: Path | None) -> Path:
    """The cache directory named by one of the options (or the environment)."""
    import os

    from harness.spec.sections import CACHE_ENV, CACHE_NAME

    given = [x for x in (cache, spec, store) if x is not None]
    if len(given) > 1:
        fail("give one of --cache, --spec, --store", code=USAGE_ERROR)
    if cache is not None:
        return cache.resolve()
    if spec is not None:
        from harness.spec import load_spec

        return load_spec(spec, check_store=False).cache_dir
    env = os.environ.get(CACHE_ENV, "").strip()
    if store is not None:
        return Path(env).expanduser().resolve() if env else store.resolve().parent / CACHE_NAME
    if env:
        return Path(env).expanduser().resolve()
    fail(f"name the cache: --cache DIR, --spec SPEC or --store STORE (or set {CACHE_ENV})", code=USAGE_ERROR)
    raise AssertionError  # fail() exits


@app.command("info")
@friendly
def info_cmd(cache: CacheOpt = None, spec: SpecOpt = None, store: StoreOpt = None) -> None:
    """Where the task cache is, how many entries it holds and which run directories use it."""
    from harness.backtest.cache import TaskCache

    root = _resolve(cache, spec, store)
    if not root.is_dir():
        typer.echo(f"cache {root}: not created yet (the first run creates it)")
        return
    i = TaskCache(root).info()
    typer.echo(f"cache {root}: {i['tasks']} task results, {i['failures']} failures, {i['plans']} plans, "
               f"{i['cubes']} release indexes, {i['pools']} pool weights; {i['bytes'] / 1e6:.1f} MB")
    for r in i["runs"]:
        typer.echo(f"  used by {r}")
    for r in i["gone"]:
        typer.echo(f"  registered but gone: {r} ('vintage-harness cache clean' drops it)")


@app.command("clean")
@friendly
def clean_cmd(
    cache: CacheOpt = None,
    spec: SpecOpt = None,
    store: StoreOpt = None,
    apply: Annotated[bool, typer.Option("--apply", help="Remove the files (without it: a dry run that "
                                        "only lists them).")] = False,
) -> None:
    """List, and with --apply remove, cache entries no run uses and files left by killed runs.

    A run registers the entries it uses; registrations of run directories that are gone are
    dropped. Removed: task results, information sets and release indexes no remaining run
    uses; temporary files in the cache and in the registered run directories; ledger files
    their run.json does not name. Never runs beside a run (exit 3 while one uses the cache).
    """
    from harness.backtest.cache import TaskCache

    root = _resolve(cache, spec, store)
    res = TaskCache(root).clean(apply=apply)  # CacheBusyError: exit 3 (harness.cli._common.exit_code)
    for rel, size in res.removable:
        typer.echo(f"{'removed' if rel in res.removed else 'would remove'} {rel} ({size / 1e3:.0f} kB)")
    for note in res.skipped:
        typer.echo(f"left alone: {note}", err=True)
    typer.echo(res.summary())
