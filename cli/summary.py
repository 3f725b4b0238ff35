"""The end-of-run summary: tonnage to stdout, paths and cautions after it."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from .options import echo, echo_err

if TYPE_CHECKING:
    from geosoil.job import RunResult

__all__ = ["print_cautions", "print_summary", "print_warnings"]


def print_warnings(warnings: Sequence[str], *, where: str, quiet: bool) -> None:
    """The run's warnings on stderr, saying where they are recorded (nothing when quiet)."""
    if warnings and not quiet:
        echo_err(f"{len(warnings)} warning(s) recorded in {where}:")
        for w in warnings:
            echo_err(f"  - {w}")


def print_cautions(cautions: Sequence[str] | None = None) -> None:
    """The cautions that end the output of every command that gives rates (stdout):
    ``cautions`` as the command's run.json and report hold them (default: the standing
    ones, :data:`geosoil.report.CAUTIONS`)."""
    if cautions is None:
        from geosoil.report import CAUTIONS

        cautions = CAUTIONS
    echo("")
    echo("Cautions:")
    for c in cautions:
        echo(f"  * {c}")


def print_summary(result: RunResult, *, quiet: bool) -> None:
    """Print the tonnage table (stdout), then files, warnings and cautions."""
    from geosoil.outputs import prescribed, reasons_to_say
    from geosoil.tonnage import KG_PER_SHORT_TON, format_summary, mass_unit_for

    settings = result.farm.prep.project.settings
    rate_unit = settings.output.rate_unit
    headline, every = prescribed(result.farm)
    why = reasons_to_say(headline, every)  # run.json and the report keep every line
    t = result.tonnage
    if len(t) and (t["tonnes"] > 0).any():
        echo(format_summary(t, rate_unit=rate_unit, currency=settings.tonnage.currency))
    else:
        echo(headline)
    if why:
        echo("Why:" if headline.startswith("Nothing") else "Rules that gave no product:")
        for line in why:
            echo(f"  - {line}")
    first = result.record.get("first_season_tonnes")
    if first:
        echo("")
        echo("Rates are split into seasons; the totals above cover every season.")
        echo("To spread this season (then re-test before the next):")
        short = mass_unit_for(rate_unit) == "short ton"
        for product, tonnes in sorted(first.items()):
            if short:
                echo(f"  {product}: {tonnes * 1000 / KG_PER_SHORT_TON:,.2f} short tons")
            else:
                echo(f"  {product}: {tonnes:,.2f} t")
    echo("")
    echo(f"Output folder: {result.out_dir}")
    for name in ("tonnage.csv", "map.html", "report.html", "run.json"):
        echo(f"  {result.out_dir / name}")
    n_presc = sum(1 for p in result.written if "prescriptions" in p.parts)
    echo(f"  {result.out_dir / 'prescriptions'}  "
         + (f"({n_presc} files)" if n_presc else "(none: nothing prescribed)"))
    shortened = result.record.get("names_shortened") or []
    if shortened:
        echo("")
        echo("Names shortened in the files (original -> as written):")
        for item in shortened:
            echo(f"  {item['what']}: {item['original']!r} -> {item['short']!r}"
                 f" ({item['format']})")
    print_warnings(result.warnings, where="run.json and the report", quiet=quiet)
    print_cautions(result.record["cautions"])  # the list run.json and the report hold
