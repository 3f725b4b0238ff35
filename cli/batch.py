"""``geosoil batch PROJECTS... --out DIR``: many farms in one batch, on a Dask cluster."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from .options import echo, echo_err, handle_errors, loading_stack, verbosity_options
from .summary import print_cautions

__all__ = ["batch"]


def _memory_limit(_ctx: click.Context, _param: click.Parameter, value: str) -> str:
    """``auto``, a size such as ``4GiB``, or ``0`` for no limit (checked with Dask's parser
    when Dask is there; without it the batch stops later with the install hint)."""
    if value in ("auto", "0"):
        return value
    try:
        from dask.utils import parse_bytes
    except ImportError:
        return value
    try:
        parse_bytes(value)
    except (ValueError, TypeError):
        raise click.BadParameter(
            f"'{value}' is not a size; give for example 4GiB, 1500MB or auto"
        ) from None
    return value


def _table(outcomes: list, products: list[str]) -> str:  # type: ignore[type-arg]
    header = ["Farm", "Status", "Paddocks", *[f"{p} (t)" for p in products], "Cost",
              "Warnings", "Time (s)"]
    rows = []
    for o in outcomes:
        ok = o.status not in ("failed", "not in this batch")
        rows.append([
            o.name, o.status, "" if o.paddocks is None else str(o.paddocks),
            *[f"{o.tonnes[p]:,.2f}" if ok and p in o.tonnes else "" for p in products],
            "" if o.cost is None else f"{o.cost:,.2f}",
            str(len(o.warnings)) if ok else "",
            "" if o.seconds is None else f"{o.seconds:.1f}",
        ])
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(header)]

    def fmt(cells: list[str]) -> str:
        return "  ".join(c.ljust(widths[i]) if i < 2 else c.rjust(widths[i])
                         for i, c in enumerate(cells)).rstrip()

    return "\n".join([fmt(header), *(fmt(r) for r in rows)])


@click.command()
@click.argument("projects", nargs=-1, required=True,
                type=click.Path(exists=True, path_type=Path), metavar="PROJECTS...")
@click.option("--out", "out", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Batch folder: one output folder per farm, and the batch summary.")
@click.option("--scheduler", metavar="ADDRESS",
              help="Address of a running Dask scheduler, such as tcp://host:8786 "
              "(default: a cluster on this computer).")
@click.option("--workers", type=click.IntRange(min=1),
              help="Worker processes of the cluster on this computer (default: one per core).")
@click.option("--memory-limit", default="auto", show_default=True, callback=_memory_limit,
              help="Memory limit of each worker on this computer, such as 4GiB; 'auto' shares "
              "the computer's memory equally, 0 sets none.")
@click.option("--overwrite", is_flag=True,
              help="Write the batch into a non-empty folder that holds no earlier batch (its "
              "other files are left as they are).")
@click.option("--no-cache", is_flag=True,
              help="Run every farm again (even unchanged ones) and interpolate again.")
@verbosity_options
@click.pass_context
@handle_errors
def batch(ctx: click.Context, projects: tuple[Path, ...], out: Path, scheduler: str | None,
          workers: int | None, memory_limit: str, overwrite: bool, no_cache: bool) -> None:
    """Run many farms in one batch, each into OUT/<farm>/, with a summary of them all.

    PROJECTS are project folders, project files, folders of project folders, or text
    files listing projects one a line. A farm whose inputs, settings and geosoil are
    unchanged since the last batch into OUT is skipped. A farm that fails is reported
    and the others go on; the exit status is then 1.
    """
    with loading_stack():
        from geosoil.batch import SUMMARY_CSV, SUMMARY_HTML, find_projects, products_of, run_batch

    if scheduler and (workers is not None or memory_limit != "auto"):
        raise click.UsageError(
            "--workers and --memory-limit set up the cluster on this computer; with "
            "--scheduler the running cluster's workers are used as they are"
        )
    quiet = ctx.obj["quiet"]

    def progress(message: str) -> None:
        if not quiet:
            echo_err(message)

    found = find_projects(projects)
    mem: str | int | None = None if memory_limit == "0" else memory_limit
    result = run_batch(found, out_dir=out, scheduler=scheduler, workers=workers,
                       memory_limit=mem, use_cache=not no_cache, overwrite=overwrite,
                       progress=progress)
    echo(_table(result.outcomes, products_of(result.outcomes)))
    echo("")
    for o in result.outcomes:
        if o.note:
            echo(f"{o.name}: {o.note}")
    echo(f"Batch folder: {result.out_dir}")
    for name in (SUMMARY_CSV, SUMMARY_HTML):
        echo(f"  {result.out_dir / name}")
    print_cautions(result.record["cautions"])
    if result.failed:
        echo_err(f"{len(result.failed)} of {len(result.outcomes)} farm(s) failed:")
        for o in result.failed:
            echo_err(f"  {o.name}: {o.error}")
        sys.exit(1)
