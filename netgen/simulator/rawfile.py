"""Reader for ngspice raw files (binary and ASCII), as written by ``write`` or ``-r``.

The format (ngspice manual, "Raw file format" / the Berkeley SPICE3 raw format):
a text header per plot::

    Title: ...
    Date: ...
    Plotname: Transient Analysis
    Flags: real            (or complex)
    No. Variables: 3
    No. Points: 1001
    Variables:
    \t0\ttime\ttime
    \t1\tv(drain)\tvoltage
    \t2\ti(vdd)\tcurrent
    Binary:                (or Values:)

followed by the data, point by point: ``No. Variables`` little-endian float64
values per point (two per value, real and imaginary, when the plot is complex).
ASCII data give each point as an index line and one value per line
(``re,im`` when complex). A file may hold several plots one after another.

Names are returned as in the file (``v(drain)``, ``i(vdd)``); the engine
maps them to its own names.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from netgen.errors import SimulationError

__all__ = ["RawPlot", "read_raw", "parse_raw"]


@dataclass
class RawPlot:
    """One plot of a raw file.

    Attributes
    ----------
    title, plotname : str
    complex : bool
        Whether the data are complex (AC analysis).
    names : list[str]
        Vector names in file order (the first is the scale: time, frequency, ...).
    kinds : list[str]
        Vector types as written (``time``, ``voltage``, ``current``, ``frequency``).
    data : dict[str, ndarray]
        float64 (or complex128 for a complex plot) arrays by name.
    """

    title: str = ""
    plotname: str = ""
    complex: bool = False
    names: list = field(default_factory=list)
    kinds: list = field(default_factory=list)
    data: dict = field(default_factory=dict)


def read_raw(path: str | Path) -> list[RawPlot]:
    """Read every plot of the raw file at ``path``.

    Raises
    ------
    SimulationError
        When the file is missing or not a raw file.
    """
    path = Path(path)
    try:
        blob = path.read_bytes()
    except OSError as exc:
        raise SimulationError(f"{path}: ngspice wrote no result file ({exc.strerror}).",
                              hint="check the ngspice log above for an error") from None
    return parse_raw(blob, str(path))


def _header_line(blob: bytes, pos: int) -> tuple[str, int]:
    end = blob.find(b"\n", pos)
    if end < 0:
        end = len(blob)
    return blob[pos:end].decode("latin-1").rstrip("\r"), end + 1


def parse_raw(blob: bytes, label: str = "raw file") -> list[RawPlot]:
    """Parse raw-file bytes into plots (see the module docstring for the format).

    Length: follows the raw-file layout field by field (header lines, variables, then binary or
    ASCII values), as ngspice writes it.
    """
    plots: list[RawPlot] = []
    pos = 0
    n = len(blob)
    while pos < n:
        # skip blank lines between plots
        while pos < n and blob[pos:pos + 1] in (b"\n", b"\r", b" "):
            pos += 1
        if pos >= n:
            break
        plot = RawPlot()
        n_vars = n_points = None
        data_kind = None
        while pos < n:
            line, pos = _header_line(blob, pos)
            key, _, value = line.partition(":")
            key = key.strip().lower()
            value = value.strip()
            if key == "title":
                plot.title = value
            elif key == "plotname":
                plot.plotname = value
            elif key == "flags":
                plot.complex = "complex" in value.lower()
            elif key == "no. variables":
                n_vars = int(value)
            elif key == "no. points":
                n_points = int(value)
            elif key == "variables":
                if n_vars is None:
                    raise SimulationError(f"{label}: 'Variables:' before 'No. Variables:'; not an ngspice raw file.")
                first = value  # some writers put the first variable on the same line
                rows = [first] if first else []
                while len(rows) < n_vars:
                    row, pos = _header_line(blob, pos)
                    if row.strip():
                        rows.append(row)
                for row in rows:
                    parts = row.split()
                    plot.names.append(parts[1])
                    plot.kinds.append(parts[2] if len(parts) > 2 else "")
            elif key in ("binary", "values"):
                data_kind = key
                break
            elif key in ("date", "command", "option", "offset"):
                continue
            elif not line.strip():
                continue
            else:
                raise SimulationError(f"{label}: unexpected header line {line[:60]!r}; not an ngspice raw file.")
        if data_kind is None or n_vars is None or n_points is None:
            if plots:
                break
            raise SimulationError(f"{label}: no data section; not an ngspice raw file or the run failed.")
        width = 2 if plot.complex else 1
        if data_kind == "binary":
            count = n_points * n_vars * width
            nbytes = count * 8
            if pos + nbytes > n:  # a file cut short (run killed): keep the whole points
                n_points = (n - pos) // (n_vars * width * 8)
                count = n_points * n_vars * width
                nbytes = count * 8
            flat = np.frombuffer(blob, dtype="<f8", count=count, offset=pos).copy()
            pos += nbytes
            table = flat.reshape(n_points, n_vars, width)
        else:
            table = np.zeros((n_points, n_vars, width))
            for p in range(n_points):
                for v in range(n_vars):
                    line, pos = _header_line(blob, pos)
                    parts = line.split()
                    token = parts[-1] if parts else "0"
                    if v == 0 and len(parts) < 2:
                        raise SimulationError(f"{label}: malformed ASCII data at point {p}.")
                    values = token.split(",")
                    table[p, v, 0] = float(values[0])
                    if width == 2:
                        table[p, v, 1] = float(values[1]) if len(values) > 1 else 0.0
        for k, name in enumerate(plot.names):
            if plot.complex:
                plot.data[name] = table[:, k, 0] + 1j * table[:, k, 1]
            else:
                plot.data[name] = np.ascontiguousarray(table[:, k, 0])
        plots.append(plot)
    return plots
