"""A self-contained HTML report of a run: one file, images embedded, no scripts.

The report reads the run record (``run_record.json``) and the quicklook PNGs of the output
folder (rendering those that are missing) and writes ``<out>/report.html``: the recipe, the
inputs with their checksums, one map and a band-statistics table per output, the frost
caution, the run's counts, notes, versions and timings. Images are ``data:`` URIs, the CSS
is inline, and there is no JavaScript and no external resource, so the file can be mailed
or archived on its own. All text from the record is HTML-escaped.
"""

from __future__ import annotations

import base64
import functools
import html
import math
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import click

from geothermmap.outputs import FROST_CAUTION, OUTPUTS

REPORT_NAME = "report.html"
RECORD_NAME = "run_record.json"
QUICKLOOK_DIR = "quicklook"

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; margin: 0 auto;
       max-width: 1150px; padding: 1em 1.5em 3em; color: #1a1a1a; background: #fff;
       line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.1em; }
h2 { font-size: 1.25em; border-bottom: 2px solid #d0d7de; padding-bottom: 0.2em;
     margin-top: 1.8em; }
h3 { font-size: 1.08em; margin: 1.4em 0 0.3em; }
.sub { color: #555; margin-top: 0; }
.caution { background: #fff4e5; border: 2px solid #c2410c; border-radius: 6px;
           padding: 0.7em 1em; margin: 1em 0; color: #7c2d12; font-weight: 600; }
.caution small { display: block; font-weight: normal; margin-top: 0.3em; }
.tag { display: inline-block; background: #c2410c; color: #fff; border-radius: 4px;
       padding: 0 0.4em; font-size: 0.8em; margin-left: 0.4em; vertical-align: middle; }
table { border-collapse: collapse; margin: 0.4em 0 1em; font-size: 0.9em; }
th, td { border: 1px solid #d0d7de; padding: 0.25em 0.6em; text-align: left;
         vertical-align: top; }
th { background: #f3f5f7; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
pre { background: #f6f8fa; border: 1px solid #d0d7de; border-radius: 4px; padding: 0.8em;
      overflow-x: auto; font-size: 0.85em; }
code { font-size: 0.9em; }
figure { margin: 0.5em 0; }
figure img { max-width: min(100%, 1000px); height: auto; border: 1px solid #e5e7eb;
             background: #fff; }
.missing { color: #8b0000; }
nav ul { columns: 3; font-size: 0.9em; }
footer { margin-top: 3em; color: #666; font-size: 0.85em; }
"""


def _e(value: Any) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _num(value: Any) -> str:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return _e(value)
    if isinstance(value, float) and not math.isfinite(value):
        return _e(value)
    if isinstance(value, int):
        return _e(f"{value:d}")
    text = f"{value:.6g}"
    if "e+" in text and abs(value) < 1e15:  # map coordinates: 5193000, not 5.193e+06
        text = f"{value:.0f}"
    return _e(text)


def _table(header: Iterable[str], rows: Iterable[Iterable[str]], numeric: set[int] = frozenset()
           ) -> str:
    """Rows are already-escaped HTML cells."""
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join(
        "<tr>" + "".join(f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>"
                         for i, c in enumerate(row)) + "</tr>"
        for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _data_uri(png: Path) -> str:
    return "data:image/png;base64," + base64.b64encode(png.read_bytes()).decode("ascii")


def _slug(name: str) -> str:
    return "".join(c if c.isalnum() else "-" for c in name)


def _read_record(output_dir: Path) -> dict[str, Any]:
    import json

    from geothermmap.errors import UserError

    path = output_dir / RECORD_NAME
    if not path.is_file():
        raise UserError(f"{output_dir} has no {RECORD_NAME}: give an output folder written by "
                        "`geothermmap run` or `geothermmap demo`")
    try:
        rec = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise UserError(f"{path} is not a readable run record ({err})") from None
    if not isinstance(rec, dict) or "outputs" not in rec:
        raise UserError(f"{path} is not a geothermmap run record (no 'outputs')")
    return rec


def ensure_quicklooks(output_dir: str | Path, record: dict[str, Any]) -> dict[str, Path]:
    """PNG quicklook of every output listed in ``record``, rendering the missing ones.

    Returns ``{output: PNG path}`` for the outputs whose raster or PNG exists.
    """
    from geothermmap import quicklook

    out = Path(output_dir)
    pngs: dict[str, Path] = {}
    missing: list[str] = []
    for name, entry in record.get("outputs", {}).items():
        png = out / QUICKLOOK_DIR / f"{name}.png"
        if png.is_file():
            pngs[name] = png
        elif (out / entry.get("file", f"{name}.tif")).is_file():
            missing.append(name)
    if not missing:
        return pngs
    render_map = getattr(quicklook, "render_map", None)
    if render_map is not None:
        for name in missing:
            png = out / QUICKLOOK_DIR / f"{name}.png"
            tif = out / record["outputs"][name].get("file", f"{name}.tif")
            render_map(tif, png, OUTPUTS.get(name))
            pngs[name] = png
    else:  # the run-folder API of the quicklook module
        pngs.update(quicklook.write_quicklooks(out, missing))
    return pngs


# --------------------------------------------------------------------------- sections


def _frost_outputs(record: dict[str, Any]) -> list[str]:
    return [n for n in record.get("outputs", {}) if n in OUTPUTS and OUTPUTS[n].frost]


def _section_caution(record: dict[str, Any]) -> str:
    frost = _frost_outputs(record)
    caution = record.get("caution") or FROST_CAUTION
    if not frost:
        return (f'<p class="sub">This run has no frost outputs. Frost and foundation outputs '
                f"are screening estimates: {_e(caution)}</p>")
    names = ", ".join(f"<code>{_e(n)}</code>" for n in frost)
    return (f'<div class="caution" role="note">CAUTION (frost maps of this run): '
            f"{_e(caution)}<small>Frost outputs: {names}</small></div>")


def _section_recipe(record: dict[str, Any]) -> str:
    import yaml

    recipe = record.get("recipe") or {}
    try:
        text = yaml.safe_dump(recipe, sort_keys=False, allow_unicode=True)
    except yaml.YAMLError:
        import json

        text = json.dumps(recipe, indent=2, default=str)
    return f'<h2 id="recipe">Recipe</h2><pre>{_e(text)}</pre>'


def _section_inputs(record: dict[str, Any]) -> str:
    rows = []
    for name, entry in (record.get("inputs") or {}).items():
        if "files" in entry:
            for f in entry["files"]:
                sha = str(f.get("sha256", ""))
                rows.append([_e(name), f"<code>{_e(f.get('path'))}</code>",
                             f'<code title="{_e(sha)}">{_e(sha[:12])}</code>',
                             _e(f.get("resampling")),
                             _e("same grid" if f.get("same_grid") else "warped"),
                             _num(f.get("bytes"))])
        else:
            rows.append([_e(name), f"constant {_num(entry.get('value'))}", "", "", "", ""])
    grid = record.get("grid") or {}
    grid_html = ""
    if grid:
        grid_html = ("<p>Target grid: "
                     f"{_num(grid.get('width'))} x {_num(grid.get('height'))} cells, "
                     f"<code>{_e(grid.get('crs'))}</code>, bounds "
                     f"{_e(', '.join(_num(b) for b in grid.get('bounds', [])))}, "
                     f"chunk {_num(record.get('chunk'))}</p>")
    return ('<h2 id="inputs">Inputs</h2>' + grid_html +
            _table(["input", "file / value", "sha256 (first 12)", "resampling", "alignment",
                    "bytes"], rows, numeric={5}))


def _band_table(entry: dict[str, Any]) -> str:
    units = _e(entry.get("units"))
    rows = [[_e(b.get("description")), _num(b.get("count")), _num(b.get("mean")),
             _num(b.get("std")), _num(b.get("min")), _num(b.get("max")), units]
            for b in entry.get("bands", [])]
    return _table(["band", "count", "mean", "std", "min", "max", "units"], rows,
                  numeric={1, 2, 3, 4, 5})


def _section_outputs(record: dict[str, Any], pngs: dict[str, Path]) -> str:
    parts = ['<h2 id="outputs">Outputs</h2>']
    for name, entry in record.get("outputs", {}).items():
        info = OUTPUTS.get(name)
        frost = bool(info and info.frost)
        badge = '<span class="tag">frost: screening estimate</span>' if frost else ""
        sha = str(entry.get("sha256", ""))
        parts.append(f'<h3 id="out-{_slug(name)}">{_e(name)} [{_e(entry.get("units"))}]'
                     f"{badge}</h3>")
        parts.append(f"<p>{_e(entry.get('description'))}<br>file <code>{_e(entry.get('file'))}"
                     f"</code>, {_e(entry.get('dtype'))}, sha256 "
                     f'<code title="{_e(sha)}">{_e(sha[:12])}</code></p>')
        png = pngs.get(name)
        if png is not None and png.is_file():
            parts.append(f'<figure><img src="{_data_uri(png)}" alt="{_e(name)} map"></figure>')
        else:
            parts.append('<p class="missing">No map: the raster is missing.</p>')
        parts.append(_band_table(entry))
    return "".join(parts)


def _section_counts(record: dict[str, Any]) -> str:
    rows = []
    for key, value in (record.get("counts") or {}).items():
        if isinstance(value, dict):
            text = ", ".join(f"{k}: {_num(v)}" for k, v in value.items()) or "none"
            rows.append([_e(key.replace("_", " ")), _e(text) if not value else text])
        else:
            rows.append([_e(key.replace("_", " ")), _num(value)])
    per_output = []
    for name, entry in record.get("outputs", {}).items():
        corr = entry.get("input_corrections") or {}
        nonzero = {k: v for k, v in corr.items() if v}
        if nonzero:
            per_output.append([_e(name), _e(", ".join(f"{k.replace('_', ' ')}: {v}"
                                                      for k, v in nonzero.items()))])
    html_ = '<h2 id="counts">Counts</h2>' + _table(["count", "cells"], rows, numeric={1})
    if per_output:
        html_ += "<p>Input corrections by output:</p>" + _table(["output", "cells"],
                                                                 per_output)
    return html_


def _section_notes(record: dict[str, Any]) -> str:
    notes = record.get("notes") or []
    items = "".join(f"<li>{_e(n)}</li>" for n in notes) or "<li>none</li>"
    return f'<h2 id="notes">Notes</h2><ul>{items}</ul>'


def _kv_section(title: str, anchor: str, mapping: dict[str, Any], unit: str = "") -> str:
    rows = [[_e(k), _num(v) + (f" {_e(unit)}" if unit and isinstance(v, int | float) else "")]
            for k, v in (mapping or {}).items()]
    return f'<h2 id="{anchor}">{_e(title)}</h2>' + _table(["", "value"], rows)


def render_html(record: dict[str, Any], pngs: dict[str, Path]) -> str:
    """The report page for ``record`` with the given quicklook PNGs (one string)."""
    name = (record.get("recipe") or {}).get("name") or "run"
    created = record.get("created_utc", "")
    status = record.get("status", "")
    toc = "".join(f'<li><a href="#out-{_slug(n)}">{_e(n)}</a></li>'
                  for n in record.get("outputs", {}))
    body = [
        f"<h1>geothermmap run: {_e(name)}</h1>",
        f'<p class="sub">created {_e(created)} UTC, status {_e(status)}, '
        f"{len(record.get('outputs', {}))} outputs, run key "
        f"<code>{_e(record.get('run_key', ''))}</code></p>",
        _section_caution(record),
        f'<nav><ul><li><a href="#recipe">recipe</a></li><li><a href="#inputs">inputs</a></li>'
        f'<li><a href="#outputs">outputs</a></li><li><a href="#counts">counts</a></li>'
        f'<li><a href="#notes">notes</a></li>'
        f'<li><a href="#versions">versions</a></li><li><a href="#timings">timings</a></li>'
        f"{toc}</ul></nav>",
        _section_recipe(record),
        _section_inputs(record),
        _section_outputs(record, pngs),
        _section_counts(record),
        _section_notes(record),
        _kv_section("Versions", "versions", record.get("versions") or {}),
        _kv_section("Timings", "timings", {k.removesuffix("_s"): v for k, v in
                                           (record.get("timings") or {}).items()}, unit="s"),
        f"<footer>Written by geothermmap from {_e(RECORD_NAME)}. "
        f"{_e(record.get('caution') or FROST_CAUTION)}</footer>",
    ]
    return ('<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f"<title>geothermmap report: {_e(name)}</title><style>{_CSS}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")


def write_report(output_dir: str | Path) -> Path:
    """Write ``<output_dir>/report.html`` for the run recorded in that folder.

    Quicklooks missing from ``<output_dir>/quicklook`` are rendered first. The file is
    written atomically (temporary name, then rename).
    """
    out = Path(output_dir)
    record = _read_record(out)
    pngs = ensure_quicklooks(out, record)
    path = out / REPORT_NAME
    tmp = out / f".{REPORT_NAME}.partial"
    tmp.write_text(render_html(record, pngs), encoding="utf-8")
    tmp.replace(path)
    return path


# --------------------------------------------------------------------------- command line


def _handle_errors(fn: Callable[..., Any]) -> Callable[..., Any]:
    """``geothermmap.cli.handle_errors``, imported when called (no circular import)."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        from geothermmap.cli import handle_errors

        return handle_errors(fn)(*args, **kwargs)

    return wrapper


@click.command("report")
@click.argument("output_dir", type=click.Path(path_type=Path))
@_handle_errors
def report_command(output_dir: Path) -> None:
    """Write OUTPUT_DIR/report.html for a finished run (renders missing quicklooks)."""
    path = write_report(output_dir)
    click.echo(f"report: {path}")


CLI_COMMANDS = [report_command]
