"""Command-line interface: a thin layer over :func:`geothermmap.run_recipe` and friends.

Errors a user can cause are printed as one message with exit code 1; a traceback only
with ``--debug``.
"""

from __future__ import annotations

import os

# dask runs one block per core; BLAS threads on top only oversubscribe (measured: the block
# phase 10 % faster with one BLAS thread). Set before numpy is first imported.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import sys  # noqa: E402
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

from geothermmap.cli_support import (  # re-exported for command modules
    EXIT_INTERNAL_ERROR,
    EXIT_INTERRUPTED,
    EXIT_USER_ERROR,
    _err,
    handle_errors,
)
from geothermmap.outputs import FROST_CAUTION, OUTPUTS

__all__ = ["main", "handle_errors", "EXIT_USER_ERROR", "EXIT_INTERNAL_ERROR",
           "EXIT_INTERRUPTED"]


class _Group(click.Group):
    """Usage errors (a missing option, a bad value) exit 1 like every other user error
    (click's default is 2, which this tool keeps for internal errors)."""

    def main(self, *args: Any, standalone_mode: bool = True, **kwargs: Any) -> Any:
        if not standalone_mode:
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            rv = super().main(*args, standalone_mode=False, **kwargs)
        except click.ClickException as err:
            err.show()
            sys.exit(EXIT_USER_ERROR)
        except click.exceptions.Abort:
            _err("Aborted.")
            sys.exit(EXIT_USER_ERROR)
        sys.exit(rv if isinstance(rv, int) else 0)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show full tracebacks.")
@click.version_option(package_name="geothermmap")
def main(debug: bool) -> None:  # noqa: D401
    """geothermmap: ground-temperature and frost maps at depth from surface climatologies
    and soil rasters.

    Frost and foundation outputs are screening estimates: design burial and foundation
    depths follow local codes and licensed engineers.
    """
    _stop_on_sigterm()


def _stop_on_sigterm() -> None:
    """Treat SIGTERM like Ctrl-C so that a stopped run cleans up the same way."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return

    def _raise(signum: int, frame: object) -> None:
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, _raise)


class _Progress:
    """A rich progress bar on a terminal; silent otherwise."""

    def __init__(self, enabled: bool):
        self.enabled = enabled and sys.stderr.isatty()
        self._bar = None
        self._tasks: dict[str, Any] = {}

    def __enter__(self) -> _Progress:
        if self.enabled:
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TimeElapsedColumn, TimeRemainingColumn

            self._bar = Progress("[progress.description]{task.description}", BarColumn(),
                                 "{task.completed}/{task.total}", TimeElapsedColumn(),
                                 TimeRemainingColumn(), console=Console(stderr=True))
            self._bar.start()
        return self

    def __call__(self, stage: str, done: int, total: int) -> None:
        if self._bar is None:
            return
        if stage not in self._tasks:
            label = {"blocks": "computing blocks", "maps": "writing maps"}.get(stage, stage)
            self._tasks[stage] = self._bar.add_task(label, total=total)
        self._bar.update(self._tasks[stage], completed=done, total=total)

    def __exit__(self, *exc: object) -> None:
        if self._bar is not None:
            self._bar.stop()


def _engine_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    fn = click.option("--scheduler", metavar="ADDRESS",
                      help="Run on an existing dask.distributed scheduler (tcp://host:port). "
                           "Workers must share the output folder's filesystem.")(fn)
    fn = click.option("--workers", type=click.IntRange(1, 512), default=None,
                      help="Start a local dask.distributed cluster with N worker processes "
                           "(default: the local threaded scheduler).")(fn)
    return fn


def _run_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    fn = click.option("--quiet", "-q", is_flag=True, help="No progress bar or summary.")(fn)
    fn = click.option("--overwrite", is_flag=True,
                      help="Write into a folder that holds files geothermmap did not write.")(fn)
    fn = click.option("--resume", is_flag=True,
                      help="Keep outputs already complete for the same recipe and inputs.")(fn)
    return _engine_options(fn)


def _summarise(result: Any, quiet: bool) -> None:
    if quiet:
        return
    rec = result.record
    click.echo(f"wrote {len(result.outputs)} maps to {result.output_dir}")
    for name, path in result.outputs.items():
        all_bands = rec["outputs"][name]["bands"]
        bands = [b for b in all_bands if b.get("count")]
        rng = ("no values" if not bands else
               f"{min(b['min'] for b in bands):.4g} .. {max(b['max'] for b in bands):.4g}")
        coded = {code: sum(b.get(f"{code}_cells", 0) for b in all_bands)
                 for _, code in OUTPUTS[name].codes}
        coded_text = ", ".join(f"{n} {code.replace('_', ' ')}" for code, n in coded.items() if n)
        if coded_text:  # code values are not depths or days: counted apart
            rng = f"{rng}; cells coded {coded_text}" if bands else f"cells coded {coded_text}"
        elif not bands:
            rng = "no valid cells"
        scope = f" (all {len(all_bands)} bands)" if len(all_bands) > 1 else ""
        click.echo(f"  {path.name:34s} {OUTPUTS[name].units:12s} {rng}{scope}")
    counts = rec.get("counts", {})
    click.echo(f"cells: {counts.get('valid_cells', 0)} valid, "
               f"{counts.get('nodata_cells', 0)} nodata")
    from geothermmap.kernel import BOUNDS_COUNTERS

    for k in BOUNDS_COUNTERS:
        if counts.get(k):
            click.echo(f"  {k.replace('_', ' ')}: {counts[k]} cells")
    if counts.get("freeze_thaw_cells_solved"):
        click.echo(f"freeze-thaw: {counts['freeze_thaw_cells_solved']} cells solved "
                   f"numerically, {counts.get('freeze_thaw_cells_analytic', 0)} never freeze; "
                   f"spin-up up to {counts.get('freeze_thaw_spinup_years_max', 0)} years, "
                   f"{counts.get('freeze_thaw_spinup_unconverged_cells', 0)} cells not "
                   "converged")
    for note in rec.get("notes", []):
        click.echo(f"note: {note}")
    click.echo(f"run record: {result.record_path}")
    if any(OUTPUTS[n].frost for n in result.outputs):
        click.echo(f"CAUTION (frost maps): {FROST_CAUTION}")


def _run(recipe: Path | str, output: Path, workers: int | None, scheduler: str | None,
         resume: bool, overwrite: bool, quiet: bool, quicklook: bool = False) -> Any:
    from geothermmap.pipeline import run_recipe

    with _Progress(not quiet) as bar:
        result = run_recipe(recipe, output, workers=workers, scheduler=scheduler,
                            resume=resume, overwrite=overwrite, progress=bar)
    _summarise(result, quiet)
    if quicklook:
        _pictures(result, quiet)
    return result


def _pictures(result: Any, quiet: bool) -> None:
    """Quicklook PNGs and the HTML report (modules of the product layer)."""
    try:
        from geothermmap.quicklook import render_run
        from geothermmap.report import write_report
    except ModuleNotFoundError:
        _err("note: quicklooks are not available in this installation")
        return
    pngs = render_run(result)
    report = write_report(result.output_dir)
    if not quiet:
        click.echo(f"quicklooks: {len(pngs)} PNG maps in {result.output_dir / 'quicklook'}")
        click.echo(f"report: {report}")


@main.command()
@click.argument("recipe", type=click.Path(path_type=Path))
@click.option("-o", "--output", type=click.Path(path_type=Path), required=True,
              help="Output folder.")
@click.option("--quicklook/--no-quicklook", default=False,
              help="Also write PNG maps and an HTML report of the run.")
@_run_options
@handle_errors
def run(recipe: Path, output: Path, quicklook: bool, workers: int | None,
        scheduler: str | None, resume: bool, overwrite: bool, quiet: bool) -> None:
    """Run RECIPE and write the maps into the output folder."""
    _run(recipe, output, workers, scheduler, resume, overwrite, quiet, quicklook)


@main.command()
@click.option("-o", "--output", type=click.Path(path_type=Path),
              default=Path("geothermmap-out/demo"), show_default=True, help="Output folder.")
@click.option("--quicklook/--no-quicklook", default=True, show_default=True,
              help="Also write PNG maps and an HTML report of the run.")
@_run_options
@handle_errors
def demo(output: Path, quicklook: bool, workers: int | None, scheduler: str | None,
         resume: bool, overwrite: bool, quiet: bool) -> None:
    """Run the bundled demo recipe on the bundled demo region."""
    from geothermmap.bundled import demo_recipe_path

    _run(demo_recipe_path(), output, workers, scheduler, resume, overwrite, quiet, quicklook)


@main.command()
@click.argument("recipe", type=click.Path(path_type=Path))
@handle_errors
def check(recipe: Path) -> None:
    """Validate RECIPE and its inputs without running the model (exit 0 ok, 1 not ok).

    Under strict: true every cell is read and checked against the physical bounds."""
    from geothermmap.pipeline import plan_run, scan_strict_bounds

    plan = plan_run(recipe)
    if plan.config.strict:  # every cell, as the run would: under strict a bound is an error
        scan_strict_bounds(plan)
    g = plan.grid
    click.echo(f"recipe {recipe}: ok")
    click.echo(f"grid: {g.width} x {g.height} cells, {g.crs.to_string()}, "
               f"pixel {abs(g.transform[0]):g} x {abs(g.transform[4]):g}, chunk {plan.chunk}")
    for name, layer in plan.layers.items():
        if layer.is_constant:
            click.echo(f"  {name:20s} constant {layer.value:g}")
        else:
            how = ", ".join(("aligned" if s.same_grid else f"warped ({s.resampling})")
                            for s in layer.sources)
            click.echo(f"  {name:20s} {layer.n_bands} band(s), {how}")
    click.echo(f"outputs: {', '.join(plan.outputs)}")
    for note in plan.notes:
        click.echo(f"note: {note}")


def _register_tool_commands() -> None:
    """Commands defined beside their product modules (each lists them in CLI_COMMANDS)."""
    import importlib

    for module_name in ("geothermmap.probe", "geothermmap.summarize", "geothermmap.report"):
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError:
            continue
        for command in getattr(module, "CLI_COMMANDS", ()):
            main.add_command(command)


_register_tool_commands()

if __name__ == "__main__":  # pragma: no cover
    main()
