"""Command line: ``grounding study CASE`` and ``grounding check CASE``."""

from __future__ import annotations

import sys

import click
import numpy as np

from .case.load import load_case
from .errors import CaseError, GroundingError
from .version import __version__


class _Bar:
    """Progress on standard error: tqdm bars per stage on a terminal, or (``lines``) one line per finished stage with
    its time, for logs and CI."""

    def __init__(self, enabled: bool, lines: bool = False):
        self.enabled = enabled
        self.lines = lines
        self.bars = {}
        self.started = {}

    def __call__(self, stage: str, fraction: float) -> None:
        if not self.enabled:
            return
        if self.lines:                           # a line each time the work moves on to another stage
            import time
            now = time.perf_counter()
            if self.started.get("stage") != stage:
                self._line(now)
                self.started = {"stage": stage, "at": now}
            return
        from tqdm import tqdm

        for other in [name for name in self.bars if name != stage]:     # the work moved on: one bar at a time
            self.bars.pop(other).close()
        bar = self.bars.get(stage)
        if bar is None:
            bar = self.bars[stage] = tqdm(total=100, desc=f"{stage:<9}", unit="%", leave=False, file=sys.stderr,
                                          bar_format="{desc} {bar} {percentage:3.0f}%", ncols=_columns())
        bar.n = int(round(100 * min(1.0, fraction)))
        bar.refresh()
        if fraction >= 1.0:
            bar.close()
            self.bars.pop(stage, None)

    def say(self, text: str) -> None:
        """A line of news (e.g. a refinement round's plan) on standard error, unless progress is off."""
        if not self.enabled:
            return
        if self.lines:
            click.echo(text, err=True)
        else:
            from tqdm import tqdm
            tqdm.write(text, file=sys.stderr)

    def _line(self, now: float) -> None:
        if self.started:
            click.echo(f"{self.started['stage']}: {now - self.started['at']:.1f} s", err=True)

    def close(self):
        if self.lines and self.enabled:
            import time
            self._line(time.perf_counter())
            self.started = {}
        for bar in self.bars.values():
            bar.close()
        self.bars = {}


def _columns() -> int:
    """Terminal width for progress bars (80 when the terminal does not say)."""
    import shutil

    width = shutil.get_terminal_size((80, 24)).columns
    return max(40, min(width or 80, 120))


def _fail(exc: Exception) -> None:
    """Report a refusal: one line; with ``grounding --verbose``, the lines of the file around it too."""
    click.echo(f"error: {exc}", err=True)
    ctx = click.get_current_context(silent=True)
    verbose = bool(ctx and ctx.find_root().params.get("verbose"))
    if verbose and isinstance(exc, CaseError) and exc.line:
        for text in _context_lines(exc.file, exc.line):
            click.echo(text, err=True)
    sys.exit(2)


def _context_lines(file: str, line: int, around: int = 2) -> list[str]:
    """The lines of ``file`` around ``line`` (1-based), numbered, the line itself marked with '>'."""
    try:
        with open(file, encoding="utf-8", errors="replace") as f:
            lines = f.read().splitlines()
    except OSError:
        return []
    lo, hi = max(1, line - around), min(len(lines), line + around)
    return [f"  {'>' if k == line else ' '} {k:>5} | {lines[k - 1][:200]}" for k in range(lo, hi + 1)]


@click.group()
@click.version_option(__version__, prog_name="grounding")
@click.option("--verbose", is_flag=True, help="On a refusal, also show the lines of the file around the problem.")
def main(verbose):
    """Earthing-grid studies: grid resistance, GPR, touch and step voltages against IEEE Std 80 limits.

    A preliminary study aid: results must be reviewed by a licensed professional engineer.
    """


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write the results as JSON.")
@click.option("--report", "report_file", type=click.Path(dir_okay=False), help="Also write the review report (PDF).")
@click.option("--plots", "plots_dir", type=click.Path(file_okay=False), help="Also write the figures as PNG files here.")
@click.option("--csv", "csv_file", type=click.Path(dir_okay=False), help="Also write the surface map as CSV.")
@click.option("--dxf", "dxf_file", type=click.Path(dir_okay=False),
              help="Also write a DXF drawing (electrodes, zones, contours, touch-limit line, worst points; metres).")
@click.option("--html", "html_file", type=click.Path(dir_okay=False),
              help="Also write an interactive view (one self-contained HTML file: maps, hover values, verdicts).")
@click.option("--units", type=click.Choice(["si", "us"]), default="si", show_default=True,
              help="us: also print conductor areas in kcmil.")
@click.option("--converge", is_flag=True,
              help="Halve the segments and the map spacing until the worst voltages change by less than 1 %.")
@click.option("--max-time", "max_time", type=click.FloatRange(min=1.0), default=900.0, show_default=True,
              help="With --converge: seconds the refinement may take; a round predicted to end later is not run.")
@click.option("--progress", "progress_lines", is_flag=True,
              help="One line per stage with its time on standard error (for logs; bars need a terminal).")
@click.option("--no-cache", "no_cache", is_flag=True,
              help="Solve everything again: neither use nor keep solves from earlier runs.")
@click.option("--quiet", is_flag=True, help="No progress bars.")
def study(case_file, json_file, report_file, plots_dir, csv_file, dxf_file, html_file, units, converge, max_time,
          progress_lines, no_cache, quiet):
    """Run a study of CASE (YAML) and print the summary.

    Solves are kept between runs (see `grounding cache`): a run after an edit of limits, fault data, coverings or
    outputs reuses the earlier solve and says so."""
    from .outputs.summary_text import study_summary
    from .study.converge import converge_study
    from .study.pipeline import run_study

    bar = _Bar(enabled=not quiet and (sys.stderr.isatty() or progress_lines), lines=progress_lines)
    written = []
    try:
        bar("read case", 0.0)
        case = load_case(case_file)
        _check_outputs_early((json_file, report_file, csv_file, dxf_file, html_file), _inputs_of(case))
        cache = None if no_cache else _open_cache()
        result = converge_study(case, progress=bar, cache=cache, max_time=max_time, say=bar.say)[0] if converge \
            else run_study(case, progress=bar, cache=cache)
        bar("outputs", 0.0)
        written = _write_outputs(result, json_file, report_file, plots_dir, csv_file, _inputs_of(case), dxf_file,
                                 html_file)
        bar.close()
    except GroundingError as exc:
        bar.close()
        _fail(exc)
    click.echo(study_summary(result, units))
    for path in written:
        click.echo(f"Written: {path}")


def _open_cache():
    """The store of solves kept between runs, or None (with a one-line note) when it cannot be opened."""
    from .study.cache import SolveCache, cache_directory
    try:
        return SolveCache()
    except Exception as exc:                                    # any failure of the store: solve without it
        click.echo(f"note: solves are not kept between runs: the cache at {cache_directory()} cannot be used "
                   f"({type(exc).__name__}: {exc}); set GROUNDING_CACHE_DIR to a writable folder", err=True)
        return None


@main.group()
def cache():
    """Solves kept between runs: where they are, how much they take, and clearing them.

    The folder is GROUNDING_CACHE_DIR, else the user's cache directory (XDG_CACHE_HOME on Linux) + grounding/solves;
    it holds at most 1 GiB, least recently used entries leaving first."""


@cache.command("info")
def cache_info():
    """Print the cache's folder, entries and size."""
    store = _open_cache()
    if store is None:
        sys.exit(2)
    entries, size = store.info()
    click.echo(f"Cache  {store.directory}\nEntries  {entries}\nSize  {size / 1e6:.1f} MB (limit {store.store.size_limit / 1e6:.0f} MB)")


@cache.command("clear")
def cache_clear():
    """Remove every kept solve."""
    store = _open_cache()
    if store is None:
        sys.exit(2)
    count = store.clear()
    click.echo(f"Removed {count} entr{'y' if count == 1 else 'ies'} from {store.directory}")


def _write_outputs(result, json_file, report_file, plots_dir, csv_file, inputs=(), dxf_file=None,
                   html_file=None) -> list[str]:
    """Build every requested output in memory first, then write each atomically."""
    from pathlib import Path

    files: list[tuple[str, bytes]] = []
    if html_file:
        from .outputs.html_view import study_html
        files.append((html_file, study_html(result)))
    if json_file:
        from .outputs.results_json import results_json
        files.append((json_file, results_json(result)))
    if csv_file:
        from .outputs.surface_csv import surface_csv
        files.append((csv_file, surface_csv(result)))
    if dxf_file:
        from .outputs.drawing_dxf import study_dxf
        files.append((dxf_file, study_dxf(result)))
    if plots_dir:
        from .outputs.figures import all_figures, png_bytes
        folder = Path(plots_dir)
        if not folder.parent.is_dir():
            raise GroundingError(f"{plots_dir}: parent folder '{folder.parent}' does not exist")
        folder.mkdir(exist_ok=True)
        from .outputs.figures import svg_bytes
        for f in all_figures(result):
            files.append((str(folder / f"{f.name}.svg"), svg_bytes(f.figure)))
            files.append((str(folder / f"{f.name}.png"), png_bytes(f.figure)))
    if report_file:
        from .outputs.report import build_report
        files.append((report_file, build_report(result)))
    _write_all(files, inputs)
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
                from .outputs.soil_outputs import traverses_figure
                files.append((plot_file, png_bytes(traverses_figure(fits))))
            else:
                files.append((plot_file, png_bytes(fit_figure(next(iter(fits.values()))))))
        _write_all(files, [readings_file])
    except GroundingError as exc:
        _fail(exc)
    click.echo(caution_box(CAUTIONS))
    for name, fit in fits.items():
        click.echo(fit_text(fit, name))
    for path, _ in files:
        click.echo(f"Written: {path}")


def _parallel_options(f):
    f = click.option("--cluster", help="Address of a Dask scheduler to run the options on (tcp://host:port).")(f)
    f = click.option("--workers", type=click.IntRange(1, 256), default=1, show_default=True,
                     help="Local worker processes.")(f)
    f = click.option("--quiet", is_flag=True, help="No progress bar.")(f)
    return f


def _option_bar(quiet: bool, total: int):
    from tqdm import tqdm

    bar = tqdm(total=total, desc="options", unit="opt", file=sys.stderr, ncols=_columns(),
               disable=quiet or not sys.stderr.isatty(), leave=False)

    def update(done, total_):
        bar.n = done
        bar.refresh()

    return bar, update


def _study_options(cases, labels, by, quiet, workers, cluster, reused=None):
    """Run the options with a progress bar; return them with the winner and the reason. ``reused`` maps case
    indices to recorded results that stand for their studies (those cases are not solved)."""
    from .options.compare import best_option, make_options, recorded_option
    from .options.runner import run_options

    reused = reused or {}
    todo = [i for i in range(len(cases)) if i not in reused]
    bar, update = _option_bar(quiet, len(todo))
    try:
        results = run_options([cases[i] for i in todo], workers=workers, cluster=cluster, progress=update)
    finally:
        bar.close()
    studied = dict(zip(todo, make_options([labels[i] for i in todo], results)))
    options = [studied[i] if i in studied else recorded_option(labels[i], cases[i], reused[i])
               for i in range(len(cases))]
    return (options, *best_option(options, by))


def _table_files(options, best, reason, by, json_file, csv_file, extra=None):
    """The JSON and CSV outputs both option commands share, as (path, bytes) pairs."""
    from .outputs.options_outputs import options_csv, options_json

    files = []
    if json_file:
        files.append((json_file, options_json(options, best, reason, by, extra)))
    if csv_file:
        files.append((csv_file, options_csv(options)))
    return files


@main.command()
@click.argument("case_files", metavar="CASE...", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--by", type=click.Choice(["cost", "margin", "resistance", "material"]), default="margin",
              show_default=True, help="How the winner is chosen.")
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write the comparison as JSON.")
@click.option("--csv", "csv_file", type=click.Path(dir_okay=False), help="Also write one CSV row per option.")
@click.option("--report", "report_file", type=click.Path(dir_okay=False), help="Also write a comparison report (PDF).")
@click.option("--html", "html_file", type=click.Path(dir_okay=False),
              help="Also write the options side by side as one interactive, self-contained HTML file.")
@click.option("--results", "results_files", multiple=True, type=click.Path(dir_okay=False),
              help="A study's --json results of one of the CASEs (repeatable): that case is not solved again while "
                   "the case file, the files it reads and the tool version are unchanged.")
@_parallel_options
def compare(case_files, by, json_file, csv_file, report_file, html_file, results_files, quiet, workers, cluster):
    """Compare layout options side by side: one column per CASE."""
    from .options.recorded import match_recorded, read_recorded
    from .outputs.options_outputs import compare_table, comparison_report
    from .outputs.summary_text import caution_box

    try:
        cases = [load_case(f) for f in case_files]
        records = [read_recorded(f) for f in results_files]
        _check_outputs_early((json_file, csv_file, report_file, html_file),
                             list(case_files) + _inputs_of(*cases) + list(results_files))
        reused, notes = match_recorded(cases, records, needs_maps=bool(report_file or html_file))
        for line in notes:
            click.echo(line)
        options, best, reason = _study_options(cases, [c.title for c in cases], by, quiet, workers, cluster, reused)
        files = _table_files(options, best, reason, by, json_file, csv_file)
        if report_file:
            files.append((report_file, comparison_report(options, best, reason)))
        if html_file:
            from .outputs.html_view import compare_html
            files.append((html_file, compare_html([o.result for o in options], [o.label for o in options])))
        _write_all(files, list(case_files) + _inputs_of(*cases) + list(results_files))
    except GroundingError as exc:
        _fail(exc)
    click.echo(caution_box())
    click.echo(compare_table(options, best, reason))
    for path, _ in files:
        click.echo(f"Written: {path}")


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
@click.option("--by", type=click.Choice(["cost", "margin", "resistance", "material"]), default="material",
              show_default=True, help="How the best option is chosen.")
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write every option as JSON.")
@click.option("--csv", "csv_file", type=click.Path(dir_okay=False), help="Also write one CSV row per option.")
@click.option("--plot", "plot_file", type=click.Path(dir_okay=False), help="Also write the trade-off plot (PNG).")
@_parallel_options
def sweep(case_file, by, json_file, csv_file, plot_file, quiet, workers, cluster):
    """Run every combination of the CASE's sweep block and tabulate the options."""
    from .options.sweep import load_variants
    from .outputs.figures import png_bytes
    from .outputs.options_outputs import sweep_table, tradeoff_figure
    from .outputs.summary_text import caution_box

    try:
        variants = load_variants(case_file)
        options, best, reason = _study_options([v.case for v in variants], [v.label for v in variants], by,
                                               quiet, workers, cluster)
        files = _table_files(options, best, reason, by, json_file, csv_file,
                             {"settings": [dict(v.settings) for v in variants]})
        if plot_file:
            files.append((plot_file, png_bytes(tradeoff_figure(options, best))))
        _write_all(files, [case_file] + _inputs_of(variants[0].case))
    except GroundingError as exc:
        _fail(exc)
    click.echo(caution_box())
    click.echo(sweep_table(options))
    click.echo(f"Best by {by}: option {best + 1} ({options[best].label}): {reason}." if best is not None
               else f"Best by {by}: none; {reason}.")
    for path, _ in files:
        click.echo(f"Written: {path}")


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
@click.option("--by", type=click.Choice(["material", "cost"]), default="material", show_default=True,
              help="What to minimise.")
@click.option("--out", "out_file", type=click.Path(dir_okay=False),
              help="Where to write the chosen layout's case file (default CASE-design.yaml in the current folder).")
@_parallel_options
def design(case_file, by, out_file, quiet, workers, cluster):
    """Search CASE's sweep space for the least material (or cost) that passes every criterion."""
    from pathlib import Path

    from .options.design import search
    from .options.sweep import load_variants
    from .outputs.design_case import design_case_yaml
    from .outputs.options_outputs import sweep_table
    from .outputs.summary_text import MARGINAL, caution_box

    try:
        variants = load_variants(case_file)
        if by == "cost" and variants[0].case.costs is None:
            raise GroundingError(f"{case_file}: --by cost needs unit prices; add a costs block (see docs/options.md) "
                                 "or use --by material")
        bar, update = _option_bar(quiet, len(variants))
        found = search(variants, by=by, workers=workers, cluster=cluster, progress=update)
        bar.close()
        files = []
        if found.best is not None:
            chosen = next(v for v in variants if v.label == found.best.label)
            out = out_file or Path(case_file).stem + "-design.yaml"          # in the current folder
            files.append((out, design_case_yaml(chosen, case_file, out)))
        _write_all(files, [case_file] + _inputs_of(variants[0].case))
    except GroundingError as exc:
        _fail(exc)
    click.echo(caution_box())
    click.echo(f"Studied {len(found.studied)} of {len(variants)} options, cheapest first by {by}:")
    click.echo(sweep_table(found.studied))
    if found.best is None:
        click.echo("No option in the sweep space passes every criterion.")
    else:
        b = found.best
        q = b.quantities
        click.echo(f"Least {by} that passes: {b.label}: {q.mass_kg:,.0f} kg of metal"
                   + (f", cost {q.cost:,.0f} {q.currency}" if q.cost is not None else "")
                   + f"; touch margin {b.touch_margin * 100:+.0f} %, step margin {b.step_margin * 100:+.0f} %.")
        click.echo(f"Every cheaper option ({len(found.studied) - 1}) was studied and fails.")
        if min(b.touch_margin, b.step_margin) < MARGINAL:
            click.echo(f"!! Its margin is below {MARGINAL * 100:.0f} % of the limit: marginal. Study the written case "
                       "with a finer discretisation and check the soil and fault data before relying on it.")
    for path, _ in files:
        click.echo(f"Written: {path}")


def _inputs_of(*cases) -> list[str]:
    """Every file a run read: the case files, their drawings and their sounding readings."""
    return [p for c in cases if c is not None for p in (c.source, *(path for _, path, _ in c.input_files()))]


def _guard_outputs(paths, inputs) -> None:
    """Refuse an output path that is (after ./, .., links) one of the run's inputs, or given twice: a run
    must never overwrite the user's data."""
    import os
    from pathlib import Path

    def same(a: Path, b: Path) -> bool:
        if a.resolve() == b.resolve():
            return True
        try:
            return a.exists() and b.exists() and os.path.samefile(a, b)
        except OSError:
            return False

    seen = []
    for p in paths:
        out = Path(p)
        for i in inputs:
            if same(out, Path(i)):
                raise GroundingError(f"{p}: this output path is the input file {i}; writing it would destroy the "
                                     "input: choose another output name")
        for q in seen:
            if same(out, Path(q)):
                raise GroundingError(f"{p}: this path is given for two outputs; give each output its own file")
        seen.append(p)


def _check_outputs_early(paths, inputs) -> None:
    """Before any work: refuse outputs onto inputs or twice given, and outputs into missing folders, so that a
    long study is not run only to be refused at the end."""
    from pathlib import Path

    paths = [p for p in paths if p]
    _guard_outputs(paths, inputs)
    for p in paths:
        folder = Path(p).parent if str(Path(p).parent) else Path(".")
        if not folder.is_dir():
            raise GroundingError(f"{p}: folder '{folder}' does not exist; create it or choose another path")


def _write_all(files, inputs=()) -> None:
    from .outputs.atomic import write_atomic

    _guard_outputs([p for p, _ in files], inputs)
    for path, data in files:
        write_atomic(path, data)


def _point(text: str, option: str) -> tuple[float, float]:
    """``X,Y`` in metres, or a one-line refusal."""
    import math
    try:
        x, y = (float(v) for v in text.split(","))
    except ValueError:
        raise GroundingError(f"{option} {text!r}: give two numbers in metres as X,Y, e.g. {option} 60,22.5") from None
    if not (math.isfinite(x) and math.isfinite(y)) or max(abs(x), abs(y)) > 1e6:
        raise GroundingError(f"{option} {text!r}: give finite coordinates in metres within ±1 000 km")
    return x, y


@main.command("fall-of-potential")
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
@click.option("--from", "start", required=True, help="X,Y (m): where the test leads connect; the traverse starts here.")
@click.option("--current-at", "rod", required=True, help="X,Y (m): the current rod.")
@click.option("--rod-length", type=click.FloatRange(min=0.1, max=30), default=1.0, show_default=True,
              help="Current rod length, m.")
@click.option("--rod-diameter", type=click.FloatRange(min=0.005, max=0.1), default=0.016, show_default=True,
              help="Current rod diameter, m.")
@click.option("--probe-direction", "direction", type=float, default=None,
              help="Traverse direction, degrees anticlockwise from +x (default: toward the current rod).")
@click.option("--probes", default=None, help="Probe distances from --from, m: d1,d2,… (default 40 points to the rod).")
@click.option("--measured", "measured_file", type=click.Path(dir_okay=False),
              help="CSV of readings (distance_m,resistance_ohm): fitted against the predicted curve.")
@click.option("--json", "json_file", type=click.Path(dir_okay=False), help="Also write the results as JSON.")
@click.option("--plot", "plot_file", type=click.Path(dir_okay=False), help="Also write the curve (.png or .svg).")
@click.option("--no-plan", "no_plan", is_flag=True, help="Skip the search of the current-rod distance per accuracy.")
@click.option("--quiet", is_flag=True, help="Only the written files' names.")
def fall_of_potential(case_file, start, rod, rod_length, rod_diameter, direction, probes, measured_file, json_file,
                      plot_file, no_plan, quiet):
    """Predict the fall-of-potential test of CASE's grid (IEEE Std 81) and read measured readings against it."""
    from .outputs.fall_of_potential_outputs import (
        fall_of_potential_figure,
        fall_of_potential_json,
        fall_of_potential_text,
    )
    from .study.fall_of_potential import fit_measured, parse_measured, predict_test
    from .textfile import read_user_text
    try:
        start_xy, rod_xy = _point(start, "--from"), _point(rod, "--current-at")
        distances = None
        if probes is not None:
            try:
                distances = [float(v) for v in probes.split(",") if v.strip()]
            except ValueError:
                raise GroundingError(f"--probes {probes!r}: give distances in m separated by commas") from None
        if plot_file and not plot_file.lower().endswith((".png", ".svg")):
            raise GroundingError(f"--plot {plot_file}: give a .png or .svg file")
        case = load_case(case_file)
        inputs = _inputs_of(case) + ([measured_file] if measured_file else [])
        _check_outputs_early((json_file, plot_file), inputs)
        measured = None
        if measured_file:
            text, _ = read_user_text(measured_file, "a CSV of fall-of-potential readings", encoding="utf-8-sig")
            measured = parse_measured(text, measured_file)
        prediction = predict_test(case, start_xy, rod_xy, distances, direction, rod_length, rod_diameter,
                                  plan=not no_plan)
        fit = None
        if measured is not None:
            if direction is None and measured[0].max() >= prediction.curve.rod_distance:
                raise GroundingError(f"{measured_file}: a reading at {measured[0].max():g} m is at or beyond the "
                                     f"current rod ({prediction.curve.rod_distance:.1f} m from --from)")
            fit = fit_measured(case, prediction, *measured, rod_length=rod_length, rod_diameter=rod_diameter)
        files = []
        if json_file:
            files.append((json_file, fall_of_potential_json(prediction, fit, measured)))
        if plot_file:
            from .outputs.figures import png_bytes, svg_bytes
            fig = fall_of_potential_figure(prediction, fit, measured)
            files.append((plot_file, svg_bytes(fig) if plot_file.lower().endswith(".svg") else png_bytes(fig)))
        from .outputs.atomic import write_atomic
        for path, data in files:
            write_atomic(path, data)
    except GroundingError as exc:
        _fail(exc)
    if not quiet:
        click.echo(fall_of_potential_text(prediction, fit, measured))
    for path, _ in files:
        click.echo(f"Written: {path}")


@main.command()
@click.argument("case_file", metavar="CASE", type=click.Path(dir_okay=False))
def check(case_file):
    """Validate CASE without solving it."""
    from .geometry.segments import segment
    from .solve.policy import check_model_size

    variants = None
    try:
        case = load_case(case_file)
        segments = segment(case)
        check_model_size(case, segments)
        if any(n.startswith("the sweep block") for n in case.notes):
            from .options.sweep import load_variants

            variants = load_variants(case_file)          # before anything is printed: a refusal is one line
    except GroundingError as exc:
        _fail(exc)
    click.echo(f"{case_file}: valid; {len(segments)} segments, {segments.total_length:.1f} m of electrode")
    for w in case.notes + segments.warnings:
        click.echo(f"  note: {w}")
    if variants is not None:
        click.echo(f"  sweep: {len(variants)} options, each valid")


def _reuse_freed_memory() -> None:
    """With glibc, let the allocator keep freed memory for the next arrays instead of handing it back to the system
    after every large temporary and faulting it in again (arrays up to 32 MiB from the heap, up to 512 MiB of free
    heap kept, heap grown 64 MiB at a time). Measured on the benchmark yard, paired runs: 38.9 → 28.3 s wall,
    system time 17.6 → 6.7 s, peak memory +18 % (1.73 → 2.04 GB) on a machine where page faults were dear; 4 %
    faster where they were cheap. GROUNDING_MALLOC=system leaves the allocator as it is."""
    import ctypes
    import os

    if os.environ.get("GROUNDING_MALLOC") == "system":
        return
    try:
        mallopt = ctypes.CDLL(None).mallopt       # glibc (and musl, where it does nothing); absent elsewhere
    except (OSError, AttributeError):
        return
    M_TRIM_THRESHOLD, M_TOP_PAD, M_MMAP_THRESHOLD = -1, -2, -3
    mallopt(M_MMAP_THRESHOLD, 32 * 2 ** 20)
    mallopt(M_TRIM_THRESHOLD, 512 * 2 ** 20)
    mallopt(M_TOP_PAD, 64 * 2 ** 20)


def run() -> None:
    """Console entry point: the command line, with a last safety net. A user's mistake is a
    GroundingError (one line, exit 2); anything else is a defect of this program and is reported in
    one line with exit 1 (set GROUNDING_DEBUG=1 for the traceback)."""
    import os

    _reuse_freed_memory()
    try:
        main(standalone_mode=True)
    except SystemExit:
        raise
    except Exception as exc:  # noqa: BLE001 - the safety net is the point
        if os.environ.get("GROUNDING_DEBUG"):
            raise
        detail = " ".join(str(exc).split())[:300]
        click.echo(f"internal error: {type(exc).__name__}: {detail}; this is a defect of grounding {__version__}, not "
                   f"of your input: please report it with the case file{_input_digest()} (GROUNDING_DEBUG=1 shows the "
                   "traceback)", err=True)
        sys.exit(1)


def _input_digest() -> str:
    """' (SHA-256 …)' of the first input file on the command line, to name it in a defect report."""
    import hashlib
    from pathlib import Path

    for arg in sys.argv[2:]:
        p = Path(arg)
        try:
            if p.is_file() and p.stat().st_size < 50_000_000:
                return f" (SHA-256 {hashlib.sha256(p.read_bytes()).hexdigest()[:16]}…)"
        except OSError:
            continue
    return ""


if __name__ == "__main__":
    run()
