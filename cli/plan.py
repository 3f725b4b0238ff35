"""``geosoil plan PROJECT --points N --out DIR``: where to take the next samples."""

from __future__ import annotations

from pathlib import Path

import click

from .options import (
    echo,
    handle_errors,
    loading_stack,
    out_option,
    overwrite_option,
    project_argument,
    verbosity_options,
)
from .summary import print_cautions, print_warnings

__all__ = ["plan"]


@click.command()
@project_argument
@click.option("--points", "n_points", default=None, type=click.IntRange(min=1),
              help="New sample locations per paddock (or give --budget and --cost-per-sample).")
@click.option("--budget", default=None, type=click.FloatRange(min=0.0, min_open=True),
              help="What the new samples may cost in all: floor(budget / cost per sample) "
                   "samples, split across the paddocks in proportion to their area "
                   "(largest remainder).")
@click.option("--cost-per-sample", "cost_per_sample", default=None,
              type=click.FloatRange(min=0.0, min_open=True),
              help="What one sample costs (taking it and the lab), in the budget's currency.")
@out_option
@click.option("--min-distance", "min_distance", type=click.FloatRange(min=0.0), default=None,
              help="Least distance (m) between new points and from existing samples "
                   "[default: half the spacing of a square grid of all samples].")
@click.option("--edge-setback", "edge_setback", type=click.FloatRange(min=0.0),
              default=20.0, show_default=True,
              help="Least distance (m) of a new point from its paddock's boundary, to keep "
                   "samples off headlands and fence lines (common practice); 0 for none.")
@click.option("--weight", "weighting", type=click.Choice(["rate", "limit", "uniform"]),
              default="rate", show_default=True,
              help="Where lower variance matters most: by the prescribed rate, by nearness to "
                   "the class limit (sodic limit for na/esp, acid limit for ph/ph_cacl2), "
                   "or alike.")
@click.option("--variable", default=None,
              help="Whose variogram to use (na, esp, ph, ph_cacl2, acidity, ca, mg, k, al; "
                   "esp, derived from Na, uses Na's; one the lab file does not give is an "
                   "error naming those it does) "
                   "[default: with --weight rate the variable driving the paddock's largest "
                   "prescribed product (Na/ESP for gypsum, the lime method's input for lime), "
                   "else the first of them kriged in the paddock].")
@overwrite_option
@verbosity_options
@click.pass_context
@handle_errors
def plan(ctx: click.Context, project: Path, n_points: int | None, budget: float | None,
         cost_per_sample: float | None, out: Path, min_distance: float | None,
         edge_setback: float, weighting: str, variable: str | None, overwrite: bool) -> None:
    """Propose new sample locations for PROJECT that most lower the kriging variance."""
    if (n_points is None) == (budget is None):
        raise click.UsageError("give --points, or --budget with --cost-per-sample (not both)")
    if (budget is None) != (cost_per_sample is None):
        raise click.UsageError("--budget and --cost-per-sample go together")
    with loading_stack():
        from geosoil.plan import run_plan  # the stack loads when a command runs, not at --help
        from geosoil.project import load_project

    proj = load_project(project)
    result = run_plan(proj, out_dir=out, n_points=n_points, budget=budget,
                      cost_per_sample=cost_per_sample, min_distance_m=min_distance,
                      edge_setback_m=edge_setback, weighting=weighting, variable=variable,
                      overwrite=overwrite)
    b = result.record.get("budget")
    if b:
        echo(f"Budget {b['budget']:g} at {b['cost_per_sample']:g} a sample: {b['samples']} "
             f"new sample(s), split by paddock area (largest remainder)")
    echo("Sampling plan: expected reduction in mean kriging variance")
    echo(f"{'paddock':<24} {'variable':<9} {'points':>6} {'before':>10} {'after':>10} "
         f"{'cut %':>6} {'weighted cut %':>14}")
    def _g(v: float | None, fmt: str) -> str:
        return "-" if v is None else format(v, fmt)

    for row in result.record["paddocks"]:
        var = (row["variable"] or "none") + (" (log)" if row["scale"] == "log" else "")
        echo(f"{row['paddock'][:24]:<24} {var:<9} {row['new_points']:>6} "
             f"{_g(row['mean_kriging_variance_before'], '.4g'):>10} "
             f"{_g(row['mean_kriging_variance_after'], '.4g'):>10} "
             f"{_g(row['mean_variance_reduction_pct'], '.1f'):>6} "
             f"{_g(row['weighted_variance_reduction_pct'], '.1f'):>14}")
    echo("Variable planned for, by paddock:")
    for row in result.record["paddocks"]:
        if row["variable"] is None:
            echo(f"  {row['paddock']}: none ({row['variable_reason']}); points by "
                 f"{row['weighting']}")
        else:
            echo(f"  {row['paddock']}: {row['variable']}: {row['variable_reason']}")
    echo("")
    echo(f"Output folder: {result.out_dir}")
    for p in result.written:
        echo(f"  {p}")
    print_warnings(result.warnings, where="run.json", quiet=ctx.obj["quiet"])
    print_cautions()
