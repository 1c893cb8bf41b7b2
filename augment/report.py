"""Pictures and tables for the user; the only module that imports matplotlib or pandas.

Both are imported inside the functions that use them so that start-up stays quick.
"""

from __future__ import annotations

import csv
import json
import os
import shutil
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np

from augment.conductors import ConductorGraph
from augment.errors import OptionError
from augment.units import engineering

# Colours by kind; nets take colours from a qualitative cycle.
_BODY_COLOUR = "#555555"
_COIL_COLOUR = "#b87333"
_AGGRESSOR_COLOUR = "#d62728"
_PLUS_COLOUR = "#e377c2"
_MINUS_COLOUR = "#17becf"
_NET_COLOURS = ("#1f77b4", "#2ca02c", "#9467bd", "#8c564b", "#bcbd22", "#ff7f0e", "#7f7f7f", "#aec7e8")
_MM = 1e3


def draw_geometry(graph: ConductorGraph, netlist: Any, out_path: str | Path, *,
                  size_px: tuple[int, int] = (1200, 900), dpi: int = 100) -> Path:
    """Draw the side-file's geometry in 3-D, equal axis scale, coordinates in millimetres.

    Wires are coloured by net, element bodies grey, coils copper, aggressors red and dashed,
    probe plus leads magenta and minus leads cyan, the instrument's closing segment dotted.
    Every placed terminal is marked and labelled ``ELEMENT.TERMINAL``; a legend names each
    colour. The PNG is written to a temporary name beside ``out_path`` and moved into place.

    Parameters
    ----------
    graph : ConductorGraph
        The conductor graph to draw.
    netlist : augment.netlist.Netlist
        Its netlist, for the title.
    out_path : str or Path
        Where the PNG goes.
    size_px : (int, int)
        Width and height of the picture in pixels.
    dpi : int
        Resolution used to turn ``size_px`` into a figure size.

    Returns
    -------
    Path
        ``out_path``.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    out_path = Path(out_path)
    figure = Figure(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi)
    FigureCanvasAgg(figure)
    axes = figure.add_subplot(projection="3d")
    handles: dict[str, Line2D] = {}

    def draw(points: np.ndarray, label: str, **style: Any) -> None:
        mm = np.asarray(points) * _MM
        axes.plot(mm[:, 0], mm[:, 1], mm[:, 2], **style)
        handles.setdefault(label, Line2D([], [], **style))

    nets = sorted({c.net for c in graph.conductors if c.net is not None})
    net_colour = {net: _NET_COLOURS[k % len(_NET_COLOURS)] for k, net in enumerate(nets)}
    probe_setups = {setup.conductor: setup for setup in graph.probes}
    for conductor in graph.conductors:
        if conductor.kind == "wire":
            draw(conductor.points, f"net {conductor.net}", color=net_colour[conductor.net], linewidth=2.0)
        elif conductor.kind == "body":
            draw(conductor.points, "element body", color=_BODY_COLOUR, linewidth=5.0)
        elif conductor.kind == "coil":
            draw(conductor.points, "coil", color=_COIL_COLOUR, linewidth=1.2)
            axes.text(*(conductor.points[len(conductor.points) // 2] * _MM), f" {conductor.id}", fontsize=7,
                      color=_COIL_COLOUR)
        elif conductor.kind == "aggressor":
            draw(conductor.points, "aggressor", color=_AGGRESSOR_COLOUR, linewidth=1.5, linestyle="--")
            axes.text(*(conductor.points[0] * _MM), f" {conductor.id}", fontsize=7, color=_AGGRESSOR_COLOUR)
        elif conductor.kind == "probe":
            setup = probe_setups[conductor.id]
            turn = setup.plus_lead_end
            closing = setup.closing_segment
            draw(conductor.points[:turn + 1], "probe plus lead", color=_PLUS_COLOUR, linewidth=1.5)
            draw(conductor.points[turn + (closing is not None):], "probe minus lead", color=_MINUS_COLOUR,
                 linewidth=1.5)
            if closing is not None:
                draw(conductor.points[closing:closing + 2], "instrument", color="black", linewidth=1.0,
                     linestyle=":")
            axes.text(*(conductor.points[turn] * _MM), f" {conductor.id}", fontsize=7, color="black")

    labels: dict[str, list[str]] = {}
    for (element, terminal), junction_id in graph.terminals.items():
        if (element, terminal) in graph.placed:
            labels.setdefault(junction_id, []).append(f"{element}.{terminal}")
    for junction_id, names in labels.items():
        x, y, z = np.asarray(graph.junctions[junction_id].position) * _MM
        axes.scatter([x], [y], [z], color="black", s=12, depthshade=False)
        axes.text(x, y, z, " " + ", ".join(names), fontsize=7)
    if labels:
        handles.setdefault("terminal", Line2D([], [], color="black", marker="o", linestyle="none", markersize=4))

    _equal_scale(axes, graph)
    axes.set_xlabel("x (mm)")
    axes.set_ylabel("y (mm)")
    axes.set_zlabel("z (mm)")
    title = Path(str(getattr(netlist, "path", "") or "")).name or "geometry"
    axes.set_title(f"{title}: conductors and probes")
    if handles:
        axes.legend(list(handles.values()), list(handles.keys()), loc="upper left", fontsize=8)
    return _save(figure, out_path)


def _equal_scale(axes: Any, graph: ConductorGraph) -> None:
    """Same scale on all three axes: a cube around everything drawn."""
    clouds = [c.points for c in graph.conductors] + [np.array([j.position]) for j in graph.junctions.values()]
    if clouds:
        points = np.vstack(clouds) * _MM
        low, high = points.min(axis=0), points.max(axis=0)
    else:
        low = high = np.zeros(3)
    centre = (low + high) / 2.0
    half = max(float(np.max(high - low)) / 2.0, 1.0) * 1.05
    axes.set_xlim(centre[0] - half, centre[0] + half)
    axes.set_ylim(centre[1] - half, centre[1] + half)
    axes.set_zlim(centre[2] - half, centre[2] + half)
    axes.set_box_aspect((1.0, 1.0, 1.0))


def _save(figure: Any, out_path: Path) -> Path:
    """Write the PNG under a temporary name in the target folder, then move it into place."""
    _write_atomic(out_path, lambda temporary: figure.savefig(temporary, format="png"))
    return out_path


def _write_atomic(path: Path, write) -> None:
    """Call ``write(temporary_path)`` beside ``path``, then move the result into place.

    mkstemp makes the file private; it gets the modes any new file gets before the move.
    A device or a pipe (``/dev/null``, ``/dev/stdout``, a FIFO) is written through instead:
    a move would replace the device itself.
    """
    if path.is_char_device() or path.is_fifo():
        write(path)
        return
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    os.close(handle)
    try:
        os.chmod(temporary, 0o666 & ~_umask())
        write(temporary)
        os.replace(temporary, path)
    finally:
        Path(temporary).unlink(missing_ok=True)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _atomic_folder(out_dir: Path):
    """A fresh temporary folder on ``out_dir``'s file system; ``_commit_folder`` moves it into place."""
    home = out_dir if out_dir.is_dir() else out_dir.parent
    home.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=home))
    # mkdtemp makes it private; the report should get the modes any new folder gets
    os.chmod(tmp, 0o777 & ~_umask())
    return tmp


def _commit_folder(tmp: Path, out_dir: Path, protected: Iterable[Path]) -> None:
    """Rename ``tmp`` to ``out_dir``, or, when that folder exists, move each file into it.

    Files of the same names are replaced and other files are kept. Before anything moves,
    a file that would replace one of ``protected`` (the inputs) or a folder stops it.
    """
    if not out_dir.exists():
        os.replace(tmp, out_dir)
        return
    keep = {Path(p).resolve() for p in protected}
    for entry in tmp.iterdir():
        target = out_dir / entry.name
        if target.resolve() in keep:
            raise OptionError(str(out_dir), f"the report's {entry.name} would replace the input {target}; choose another -o")
        if target.is_dir():
            raise OptionError(str(out_dir), f"the report's {entry.name} would replace the folder {target}; choose another -o")
    for entry in tmp.iterdir():
        os.replace(entry, out_dir / entry.name)
    tmp.rmdir()


def readings_columns(comparison) -> dict[str, np.ndarray]:
    """All waveforms of a comparison as columns: time (or frequency) plus PROBE:kind."""
    columns = {}
    if comparison.analysis == "ac":
        columns["frequency"] = comparison.base
        for r in comparison.readings:
            for kind in ("ideal", "local", "probed"):
                values = getattr(r, kind)
                columns[f"{r.probe.name}:{kind}:mag"] = np.abs(values)
                columns[f"{r.probe.name}:{kind}:phase"] = np.degrees(np.angle(values))
    else:
        columns["time"] = comparison.base
        for r in comparison.readings:
            for kind in ("ideal", "local", "probed"):
                columns[f"{r.probe.name}:{kind}"] = np.real(getattr(r, kind))
    return columns


SUMMARY_COLUMNS = (
    "name", "instrument", "ideal_min", "ideal_max", "local_min", "local_max", "probed_min",
    "probed_max", "max_abs_error", "rms_error", "ringing_hz", "top_source", "top_peak_v",
)


def summary_rows(document: dict) -> list[dict]:
    """One flat row per probe of a result document (for summary.csv and terminal tables)."""
    return [{**{key: probe.get(key) for key in SUMMARY_COLUMNS}, "instrument": probe["instrument"]["name"]}
            for probe in document["probes"]]


def format_table(rows: list[dict], columns: list[str]) -> str:
    """A plain fixed-width table with engineering-notation numbers."""
    def cell(value, key):
        if value is None:
            return "-"
        if isinstance(value, float):
            unit = "Hz" if key.endswith("_hz") else ("H" if key.endswith("_h") else "V")
            return engineering(value, unit)
        return str(value)

    body = [[cell(row.get(c), c) for c in columns] for row in rows]
    widths = [max(len(c), *(len(line[i]) for line in body)) if body else len(c) for i, c in enumerate(columns)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths))]
    lines += ["  ".join(v.ljust(w) for v, w in zip(line, widths)) for line in body]
    return "\n".join(lines)


def plot_reading(comparison, reading, path: Path) -> None:
    """Ideal, local and probed overlaid, the error below; engineering units on the axes."""
    import numpy as np
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    fig = Figure(figsize=(9, 6.5), constrained_layout=True)
    FigureCanvasAgg(fig)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1.3))
    ac = comparison.analysis == "ac"
    base = comparison.base
    show = (lambda v: np.abs(v)) if ac else np.real
    styles = {"ideal": ("black", "-", 2.0), "local": ("tab:blue", "--", 1.4), "probed": ("tab:red", "-", 1.1)}
    for kind, (color, style, width) in styles.items():
        top.plot(base, show(getattr(reading, kind)), color=color, linestyle=style, linewidth=width, label=kind)
    bottom.plot(base, show(reading.error), color="tab:purple", linewidth=1.0)
    if ac:
        for axis in (top, bottom):
            axis.set_xscale("log")
    for axis in (top, bottom):
        axis.xaxis.set_major_formatter(EngFormatter(unit="Hz" if ac else "s"))
        axis.yaxis.set_major_formatter(EngFormatter(unit="V"))
        axis.grid(True, alpha=0.3)
    instrument = reading.probe.instrument.name
    ringing = f", error rings at {engineering(reading.ringing_hz, 'Hz')}" if reading.ringing_hz else ""
    top.set_title(f"probe {reading.probe.name} ({instrument}){ringing}")
    top.set_ylabel("|V|" if ac else "V(plus) - V(minus)")
    top.legend(loc="best")
    bottom.set_ylabel("probed - ideal")
    bottom.set_xlabel("frequency" if ac else "time")
    fig.savefig(path, dpi=110)


def write_report(out_dir: Path, built, comparison, document: dict, protected: Iterable[Path] = ()) -> Path:
    """Write the report folder: augmented netlist, readings.csv, summary.csv, result.json, PNGs.

    Everything is written into a temporary folder first and moved into place at the end,
    so an interrupted run never leaves a half-written report. Into an existing folder the
    report's files go one by one, replacing those of an earlier report and keeping anything
    else; ``protected`` (the inputs) are never replaced.
    """
    tmp = _atomic_folder(out_dir)
    try:
        stem = Path(built.netlist.path).stem
        (tmp / f"{stem}.augmented.cir").write_text(built.augmented.text)
        (tmp / f"{stem}.original.cir").write_text(built.augmented.original_text)
        # the csv module, not pandas: importing pandas would add 0.3 s to every run and batch worker
        columns = readings_columns(comparison)
        _write_csv(tmp / "readings.csv", list(columns), zip(*(values.tolist() for values in columns.values())))
        _write_csv(tmp / "summary.csv", SUMMARY_COLUMNS,
                   ([row[key] for key in SUMMARY_COLUMNS] for row in summary_rows(document)))
        (tmp / "result.json").write_text(json.dumps(document, indent=2) + "\n")
        for reading in comparison.readings:
            plot_reading(comparison, reading, tmp / f"{reading.probe.name}.png")
        (tmp / "CAUTION.txt").write_text(document["caution"] + "\n")
        _commit_folder(tmp, out_dir, protected)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out_dir


def _write_csv(path: Path, header, rows) -> None:
    with open(path, "w", newline="", encoding="utf-8") as stream:
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(["" if value is None else value for value in row] for row in rows)


def write_text_atomic(path: Path, text: str) -> None:
    """Write a file under a temporary name and move it into place."""
    _write_atomic(path, lambda temporary: Path(temporary).write_text(text))


PROBE_TABLE_COLUMNS = [
    "name", "instrument", "ideal_min", "ideal_max", "probed_min", "probed_max", "max_abs_error", "rms_error",
    "ringing_hz", "top_source",
]


def format_probe_table(document: dict) -> str:
    """The compact terminal table of `augment run`: one row per probe."""
    return format_table(summary_rows(document), PROBE_TABLE_COLUMNS)


def extraction_document(built) -> dict:
    """The `augment extract --json` document: conductors and every coupling with |k| > 1e-9."""
    import numpy as np

    from augment.inductance import coupling_coefficients

    m = built.inductance
    names = built.augmented.inductor_names
    conductors = [
        {"id": cid, "inductor": names.get(cid), "henry": float(m.henry[i, i]), "segments": m.segments[i],
         "length_m": m.lengths_m[i]}
        for i, cid in enumerate(m.ids)
    ]
    k = coupling_coefficients(m.henry) if len(m.ids) else np.zeros((0, 0))
    couplings = [
        {"a": m.ids[i], "b": m.ids[j], "mutual_h": float(m.henry[i, j]), "k": float(k[i, j])}
        for i in range(len(m.ids)) for j in range(i + 1, len(m.ids)) if abs(k[i, j]) > 1e-9
    ]
    return {"netlist": str(built.netlist.path), "conductors": conductors, "couplings": couplings}


MATRIX_MAX = 12  # conductors up to which `augment extract` also prints the k matrix


def format_extraction(document: dict) -> str:
    """Readable extraction: each conductor with its strongest couplings, then (for up to
    MATRIX_MAX conductors) the lumped inductance matrix in H and the coupling coefficients."""
    strongest: dict[str, list] = {}
    for c in document["couplings"]:
        strongest.setdefault(c["a"], []).append((c["b"], c["k"]))
        strongest.setdefault(c["b"], []).append((c["a"], c["k"]))
    rows = []
    for c in document["conductors"]:
        top = sorted(strongest.get(c["id"], []), key=lambda p: -abs(p[1]))[:2]
        rows.append({
            "conductor": c["id"], "inductor": c["inductor"] or "-", "length": engineering(c["length_m"], "m"),
            "segments": str(c["segments"]), "self": engineering(c["henry"], "H"),
            "strongest couplings": ", ".join(f"{other} k={k:+.3g}" for other, k in top) or "-",
        })
    table = format_table(rows, ["conductor", "inductor", "length", "segments", "self", "strongest couplings"])
    ids = [c["id"] for c in document["conductors"]]
    if not 1 < len(ids) <= MATRIX_MAX:
        return table
    pairs = {frozenset((c["a"], c["b"])): c for c in document["couplings"]}
    selfs = {c["id"]: c["henry"] for c in document["conductors"]}
    columns = ["", *(f"[{j + 1}]" for j in range(len(ids)))]

    def matrix(cell) -> str:
        rows = [{"": f"[{i + 1}] {a}", **{f"[{j + 1}]": cell(a, b) for j, b in enumerate(ids)}}
                for i, a in enumerate(ids)]
        return format_table(rows, columns)

    def henry(a: str, b: str) -> str:
        value = selfs[a] if a == b else pairs.get(frozenset((a, b)), {}).get("mutual_h", 0.0)
        return engineering(value, "H") if value else "0"

    def k(a: str, b: str) -> str:
        if a == b:
            return "1"
        pair = pairs.get(frozenset((a, b)))
        return f"{pair['k']:+.3g}" if pair else "0"

    return (f"{table}\n\nlumped inductance matrix (H):\n{matrix(henry)}"
            f"\n\ncoupling coefficients k:\n{matrix(k)}")


def plot_setup_comparison(setups: list[tuple[str, Path]], path: Path, title: str = "") -> Path:
    """One picture of several probe setups on one netlist: each probe's probed reading overlaid.

    ``setups`` pairs a setup's label with its report's ``readings.csv``; the ideal reading
    of the first setup is drawn once, in black, as the reference.
    """
    import pandas as pd
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    frames = [(label, pd.read_csv(csv)) for label, csv in setups]
    base = "frequency" if "frequency" in frames[0][1].columns else "time"
    suffix = ":mag" if base == "frequency" else ""
    fig = Figure(figsize=(9, 5.5), constrained_layout=True)
    FigureCanvasAgg(fig)
    axis = fig.subplots()
    ideal_drawn = False
    for label, frame in frames:
        for column in frame.columns:
            if column.endswith(":probed" + suffix):
                probe = column.split(":")[0]
                if not ideal_drawn:
                    axis.plot(frame[base], frame[f"{probe}:ideal{suffix}"], color="black", linewidth=2, label="ideal")
                    ideal_drawn = True
                axis.plot(frame[base], frame[column], linewidth=1.1, label=f"{label}: {probe}")
    if base == "frequency":
        axis.set_xscale("log")
    axis.xaxis.set_major_formatter(EngFormatter(unit="Hz" if base == "frequency" else "s"))
    axis.yaxis.set_major_formatter(EngFormatter(unit="V"))
    axis.grid(True, alpha=0.3)
    axis.legend(loc="best", fontsize=8)
    axis.set_title(f"{title}: probed readings of each setup" if title else "probed readings of each setup")
    axis.set_xlabel(base)
    _save(fig, path)
    return path
