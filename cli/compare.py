"""``geosoil compare LAST THIS --out DIR``: what changed between two seasons of one farm."""

from __future__ import annotations

from pathlib import Path

import click

from .options import (
    echo,
    handle_errors,
    loading_stack,
    out_option,
    overwrite_option,
    verbosity_options,
)
from .summary import print_cautions, print_warnings

__all__ = ["compare"]


@click.command()
@click.argument("last", type=click.Path(exists=True, path_type=Path), metavar="LAST")
@click.argument("this", type=click.Path(exists=True, path_type=Path), metavar="THIS")
@out_option
@click.option("--ph-conversion", "ph_conversion", default=None, metavar="EQUATION",
              help="A pH conversion you trust, used only when the seasons' labs measured pH "
                   "by different methods (water, cacl2, kcl): 'TO = SLOPE * FROM + OFFSET', e.g. "
                   "'water = cacl2 + 0.6'.")
@click.option("--no-ph", "no_ph", is_flag=True,
              help="Leave pH out (seasons of different pH methods and no conversion).")
@click.option("--z", "z", type=click.FloatRange(min=0.0, min_open=True), default=1.96,
              show_default=True,
              help="A change counts where it is larger than z times its standard deviation.")
@click.option("--paired-within", "paired_within", type=click.FloatRange(min=0.0),
              default=5.0, show_default=True, metavar="METRES",
              help="A sample within this distance of one of last season's is the same site "
                   "sampled again; where most of a paddock's samples are, the per-site "
                   "differences are kriged directly (paired sites). 0: never.")
@overwrite_option
@verbosity_options
@click.pass_context
@handle_errors
def compare(ctx: click.Context, last: Path, this: Path, out: Path, ph_conversion: str | None,
            no_ph: bool, z: float, paired_within: float, overwrite: bool) -> None:
    """Map the change in ESP, pH, Ca saturation and acidity from LAST season to THIS.

    LAST and THIS are each a project (folder or geosoil.toml) or the output
    folder of 'geosoil run'; give last season's output folder to have the
    change per zone of its prescription.
    """
    with loading_stack():
        from geosoil.change import CLASS_CODES, PAIRED_CHANGE_NOTE, parse_ph_conversion
        from geosoil.compare import run_compare

    conversion = parse_ph_conversion(ph_conversion) if ph_conversion else None
    result = run_compare(last, this, out_dir=out, ph_conversion=conversion,
                         compare_ph=not no_ph, z=z, paired_within=paired_within,
                         overwrite=overwrite)
    rec = result.record
    echo(f"Change between seasons (this - last; beyond its error: |change| > {z:g} x sd)")
    if rec["ph"]:
        echo(f"  {rec['ph']}")
    # as wide as the longest variable ("Ca saturation, 10-30 cm"), at least 22
    width = max([22, *(len(r["label"]) for r in rec["paddocks"])])
    echo(f"{'paddock':<20} {'variable':<{width}} {'method':<12} {'last':>8} {'this':>8} "
         f"{'change':>8} {'fell %':>7} {'rose %':>7} {'no chg %':>8} {'not judged %':>12}")
    for r in rec["paddocks"]:
        def f(v: float | None, sign: str = "") -> str:
            return "–" if v is None else f"{v:{sign}.2f}"
        echo(f"{r['paddock'][:20]:<20} {r['label']:<{width}} {r['method']:<12} "
             f"{f(r['last_mean']):>8} "
             f"{f(r['this_mean']):>8} {f(r['change_mean'], '+'):>8} {r['fell_pct']:>7.1f} "
             f"{r['rose_pct']:>7.1f} {r['no_change_beyond_error_pct']:>8.1f} "
             f"{r['no_error_surface_pct']:>12.1f}")
    if any(r["method"] == "paired sites" for r in rec["paddocks"]):
        echo(f"  {PAIRED_CHANGE_NOTE}")
    zones = result.table[result.table["product"] != "none"]
    if len(zones):
        echo("")
        echo(f"Per zone of last season's prescription: {len(zones)} zone(s) in "
             "change_by_zone.csv, the map and the report")
    echo("")
    echo(f"Output folder: {result.out_dir}")
    for name in rec["files"]:
        if not name.startswith("change/"):
            echo(f"  {result.out_dir / name}")
    n_tif = sum(1 for name in rec["files"] if name.startswith("change/"))
    echo(f"  {result.out_dir / 'change'}  ({n_tif} files; class codes "
         + ", ".join(f"{c} {k}" for k, c in CLASS_CODES.items()) + ")")
    print_warnings(result.warnings, where="run.json and the report", quiet=ctx.obj["quiet"])
    print_cautions(rec["cautions"])
