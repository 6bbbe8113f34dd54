"""Command line: ``grounding study CASE`` and ``grounding check CASE``."""

from __future__ import annotations

import sys

import click
import numpy as np

from . import __version__
from .case_loader import load_case
from .errors import GroundingError


class _Bar:
    """tqdm progress bars per stage, on standard error."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.bars = {}

    def __call__(self, stage: str, fraction: float) -> None:
        if not self.enabled:
            return
        from tqdm import tqdm

        bar = self.bars.get(stage)
        if bar is None:
            bar = self.bars[stage] = tqdm(total=100, desc=f"{stage:<9}", unit="%", leave=False, file=sys.stderr,
                                          bar_format="{desc} {bar} {percentage:3.0f}%")
        bar.n = int(round(100 * min(1.0, fraction)))
        bar.refresh()
        if fraction >= 1.0:
            bar.close()

    def close(self):
        for bar in self.bars.values():
            bar.close()


def _fail(exc: Exception) -> None:
    click.echo(f"error: {exc}", err=True)
    sys.exit(2)


@click.group()
@click.version_option(__version__, prog_name="grounding")
def main():
    """Earthing-grid studies: grid resistance, GPR, touch and step voltages against IEEE Std 80 limits.

    A preliminary study aid: results must be reviewed by a licensed professional engineer.
    """


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write the results as JSON.")
@click.option("--report", "report_file", type=click.Path(dir_okay=False), help="Also write the review report (PDF).")
@click.option("--plots", "plots_dir", type=click.Path(file_okay=False), help="Also write the figures as PNG files here.")
@click.option("--csv", "csv_file", type=click.Path(dir_okay=False), help="Also write the surface map as CSV.")
@click.option("--quiet", is_flag=True, help="No progress bars.")
def study(case_file, json_file, report_file, plots_dir, csv_file, quiet):
    """Run a study of CASE (YAML) and print the summary."""
    from .outputs.summary_text import study_summary
    from .study import run_study

    bar = _Bar(enabled=not quiet and sys.stderr.isatty())
    written = []
    try:
        case = load_case(case_file)
        result = run_study(case, progress=bar)
        bar.close()
        written = _write_outputs(result, json_file, report_file, plots_dir, csv_file)
    except GroundingError as exc:
        bar.close()
        _fail(exc)
    click.echo(study_summary(result))
    for path in written:
        click.echo(f"Written: {path}")


def _write_outputs(result, json_file, report_file, plots_dir, csv_file) -> list[str]:
    """Build every requested output in memory first, then write each atomically."""
    from pathlib import Path

    from .outputs.atomic import write_atomic

    files: list[tuple[str, bytes]] = []
    if json_file:
        from .outputs.results_json import results_json
        files.append((json_file, results_json(result)))
    if csv_file:
        from .outputs.surface_csv import surface_csv
        files.append((csv_file, surface_csv(result)))
    if plots_dir:
        from .outputs.figures import all_figures, png_bytes
        folder = Path(plots_dir)
        if not folder.parent.is_dir():
            raise GroundingError(f"{plots_dir}: parent folder '{folder.parent}' does not exist")
        folder.mkdir(exist_ok=True)
        files += [(str(folder / f"{f.name}.png"), png_bytes(f.figure)) for f in all_figures(result)]
    if report_file:
        from .outputs.report_pdf import build_report
        files.append((report_file, build_report(result)))
    for path, data in files:
        write_atomic(path, data)
    return [p for p, _ in files]


@main.command()
@click.argument("readings_file", metavar="READINGS", type=click.Path(dir_okay=False))
@click.option("--array", type=click.Choice(["wenner", "schlumberger"]), help="Array type (default: from the columns).")
@click.option("--layers", default="auto", type=click.Choice(["1", "2", "3", "auto"]), show_default=True,
              help="Layer count to fit, or auto to fit 1, 2 and 3 and recommend one.")
@click.option("--traverses", default="together", type=click.Choice(["together", "separate"]), show_default=True,
              help="Fit all traverses together or each separately.")
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write the fit as JSON.")
@click.option("--plot", "plot_file", type=click.Path(dir_okay=False), help="Also write the sounding plot (PNG).")
def soil(readings_file, array, layers, traverses, json_file, plot_file):
    """Fit soil models to a Wenner or Schlumberger sounding (CSV)."""
    from .cautions import CAUTIONS
    from .outputs.atomic import write_atomic
    from .outputs.figures import png_bytes
    from .outputs.soil_outputs import fit_figure, fit_text, soil_json
    from .outputs.summary_text import caution_box
    from .sounding.fit import fit_soil
    from .sounding.readings import load_readings

    try:
        readings = load_readings(readings_file, array)
        count = layers if layers == "auto" else int(layers)
        names = [""] if traverses == "together" else sorted(set(readings.traverse))
        fits = {n: fit_soil(readings if traverses == "together" else
                            readings.subset(np.array([t == n for t in readings.traverse])), count) for n in names}
        files = []
        if json_file:
            files.append((json_file, soil_json(fits, readings.source, readings.sha256)))
        if plot_file:
            if len(fits) > 1:
                raise GroundingError("--plot draws one sounding; use --traverses together, or fit each file alone")
            files.append((plot_file, png_bytes(fit_figure(next(iter(fits.values()))))))
        for path, data in files:
            write_atomic(path, data)
    except GroundingError as exc:
        _fail(exc)
    click.echo(caution_box(CAUTIONS))
    for name, fit in fits.items():
        click.echo(fit_text(fit, name))
    for path, _ in files:
        click.echo(f"Written: {path}")


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
def check(case_file):
    """Validate CASE without solving it."""
    from .geometry import segment
    from .study import check_model_size

    try:
        case = load_case(case_file)
        segments = segment(case)
        check_model_size(case, segments)
    except GroundingError as exc:
        _fail(exc)
    click.echo(f"{case_file}: valid; {len(segments)} segments, {segments.total_length:.1f} m of electrode")
    for w in segments.warnings:
        click.echo(f"  note: {w}")


if __name__ == "__main__":
    main()
