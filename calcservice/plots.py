"""Figures of a response: radial-velocity curves (and the relative orbit) of a time series,
and histograms of Monte Carlo draws.

Rendering is headless (matplotlib's Agg and SVG canvases through the object-oriented
API, never pyplot, so no global backend state and no display).  matplotlib is imported
only when a figure is asked for.

The functions here know nothing about HTTP.  A time-series figure needs the calculation
re-evaluated on a fine time grid: the caller passes ``evaluate(body) -> response``.

A figure's cost does not grow with the size of the request: the model curves are drawn on their
own grid, a layer of more than :data:`MAX_MARKERS` requested points keeps one marker per cell
smaller than a marker (with the cell's extreme error-bar ends), and the histogram's bins are
counted before they are made.
"""

from __future__ import annotations

import io
import math
import textwrap
from typing import Any, Callable, Mapping

import numpy as np

from .engine import MIN_DRAWS
from .registry import DATE, Calculation
from .units import factor

MIMETYPES = {"svg": "image/svg+xml", "png": "image/png"}
#: Points per orbital period of the dense curve (spaced evenly in eccentric anomaly, so an
#: eccentric orbit's quick periastron passage is as well sampled as its slow apastron).
POINTS_PER_PERIOD = 720
#: A series spanning more periods than this is plotted against orbital phase.
MAX_CYCLES_IN_TIME = 3.0
MAX_BINS = 80
#: Diameter of a requested point's marker [pt].
MARKER_SIZE = 5.0
#: Requested points of one layer drawn one by one; more are thinned to one per cell whose diagonal
#: is a marker's radius, and a layer still larger is rasterized in SVG.
MAX_MARKERS = 1000
STAR_COLOURS = ("#1f5aa6", "#c8501e")
#: Characters of a histogram's subtitle (the output's description) per line: a 7-inch figure holds about 100 at 10 pt.
SUBTITLE_WIDTH = 90
#: Heavy-tailed draws (a mass from an isotropic inclination) are drawn over their central 95 %, with the count of
#: those beyond said, when all of them span more than 4 times as much (normal draws: 2 to 3 times): drawn whole,
#: every draw fell in one bar and the histogram showed nothing.
HISTOGRAM_SHOWN = (2.5, 97.5)
HISTOGRAM_TAIL = 4.0


class PlotError(ValueError):
    """A figure that cannot be drawn for this request; ``field`` names what to change."""

    def __init__(self, field: str, message: str):
        super().__init__(message)
        self.field = field
        self.message = message


def _new_figure(width: float, height: float):
    from matplotlib.figure import Figure
    return Figure(figsize=(width, height), dpi=100, layout="constrained")


def figure_bytes(fig, fmt: str) -> bytes:
    """The figure as SVG (text kept as text, no timestamp, stable ids) or PNG."""
    import matplotlib
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "calcservice"}):
        if fmt == "svg":
            fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": "calcservice"})
        elif fmt == "png":
            fig.savefig(buf, format="png", dpi=120, metadata={"Software": "calcservice"})
        else:
            raise ValueError(f"unknown figure format {fmt!r}")
    return buf.getvalue()


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name          # a phase or a ratio: no unit to show


# --------------------------------------------------------------------------- histograms
def histogram(name: str, draws: np.ndarray, entry: Mapping[str, Any], fmt: str, description: str = "",
              canonical_unit: str | None = None) -> bytes:
    """Histogram of the Monte Carlo draws of one output, with the median and the 68.27 % interval marked.

    ``draws`` are in the output's canonical unit; ``entry`` is the response's result (in the
    unit the response gives, which may differ when the request asked for other units);
    ``description`` the output's, as declared (its maths set by matplotlib's mathtext).
    """
    return figure_bytes(histogram_figure(name, draws, entry, description, canonical_unit), fmt)


def histogram_figure(name: str, draws: np.ndarray, entry: Mapping[str, Any], description: str = "",
                     canonical_unit: str | None = None):
    """The matplotlib Figure drawn by :func:`histogram`."""
    from .report import tex_maths
    unit = entry.get("unit", "")
    d = np.asarray(draws, dtype=float).reshape(-1)
    if canonical_unit is not None and unit != canonical_unit:
        d = d * factor(canonical_unit, unit)
    d = d[np.isfinite(d)]
    if d.size == 0:
        raise PlotError("plot", f"{name} has no finite Monte Carlo draws to plot")
    total = d.size
    lo, hi = np.percentile(d, HISTOGRAM_SHOWN)
    with np.errstate(over="ignore", invalid="ignore"):
        tailed = bool(np.ptp(d) > HISTOGRAM_TAIL * (hi - lo) > 0)
    if tailed:
        d = d[(d >= lo) & (d <= hi)]
    fig = _new_figure(7.0, 4.4)
    ax = fig.add_subplot()
    edges = histogram_bins(d)
    # draws all equal: numpy's default bar of +-0.5 around them vanishes beside a value such as 1e45
    span = (d[0] - max(abs(d[0]) * 1e-6, 0.5), d[0] + max(abs(d[0]) * 1e-6, 0.5)) if np.isscalar(edges) else None
    ax.hist(d, bins=edges, range=span, color="#9db7d5", edgecolor="#4d6f96", linewidth=0.4)
    median, low, high = entry.get("value"), entry.get("low"), entry.get("high")
    if all(isinstance(x, (int, float)) and math.isfinite(x) for x in (low, high)):
        ax.axvspan(low, high, color="#f0b45a", alpha=0.25, zorder=0, label="central 68.27 % interval")
        ax.axvline(low, color="#b87a1e", linestyle="--", linewidth=1.0)
        ax.axvline(high, color="#b87a1e", linestyle="--", linewidth=1.0)
    if isinstance(median, (int, float)) and math.isfinite(median):
        from .report import STYLES, printed_entry
        shown = printed_entry(entry)
        # a power of ten set as one (mathtext), else as text the SVG keeps searchable
        ax.axvline(median, color="#7a1e1e", linewidth=1.6,
                   label=f"median {STYLES['latex' if shown and shown.exponent else 'text'].number(shown)}")
    ax.set_xlabel(_label(name, unit))
    ax.set_ylabel("number of draws")
    # the name is an identifier ("m1_sin3i"), set as written; the description's maths as maths ("M1 sin^3 i")
    # (wrapped first, so that a long one is not cut at the figure's edge)
    title = f"{name}: {total} Monte Carlo draws".replace("$", r"\$")
    if tailed:
        title += f", the {total - d.size} outside {lo:.4g} to {hi:.4g} not shown"
    lines = [tex_maths(line) for line in textwrap.wrap(description, SUBTITLE_WIDTH, break_long_words=False)]
    ax.set_title("\n".join([title, *lines]), fontsize=10)
    ax.legend(loc="best", fontsize=8, frameon=False)
    return fig


def histogram_bins(draws: np.ndarray) -> np.ndarray | int:
    """Bin edges by the Freedman–Diaconis rule (width 2 IQR n^(-1/3); Freedman & Diaconis 1981,
    Z. Wahrscheinlichkeitstheorie verw. Gebiete 57, 453), at most :data:`MAX_BINS` bins.

    The number of bins is counted before any edge is made: heavy-tailed draws (a mass from a
    nearly face-on isotropic inclination) would otherwise ask numpy for 1e7 to 1e18 edges.
    For draws that are all equal, 10 (numpy's default count)."""
    d = np.asarray(draws, dtype=float)
    with np.errstate(over="ignore"):
        spread = np.ptp(d) if d.size else 0.0
        # the axes pad the span and step their ticks over it: draws within 1/16 of the largest double
        # overflow matplotlib's arithmetic where the span itself did not
        roomy = np.isfinite(16.0 * np.max(np.abs(d))) if d.size else True
    if not np.isfinite(spread) or not roomy:
        raise PlotError("plot", "the draws span more than a floating-point number holds: no histogram can bin them")
    if d.size < 2 or not spread > 0:
        return 10
    width = 2.0 * np.subtract(*np.percentile(d, [75, 25])) * d.size ** (-1.0 / 3.0)
    count = spread / width if width > 0 else 1.0
    return np.histogram_bin_edges(d, bins=math.ceil(count) if count <= MAX_BINS else MAX_BINS)


def marker_subset(x: np.ndarray, y: np.ndarray, dx: float, dy: float,
                  lower: np.ndarray | None = None, upper: np.ndarray | None = None) -> np.ndarray:
    """Indices of the points to draw so that the figure shows what all of them would.

    The plane is cut into cells ``dx`` by ``dy`` (data units; the caller makes a cell's diagonal at
    most a marker's radius on the page) and each occupied cell keeps the point whose error bar
    reaches lowest and the one whose bar reaches highest (``lower``/``upper``: the bars' ends;
    without bars, the cell's first point).  Every point then lies under a drawn marker and every
    bar within the span drawn at its cell; the count is bounded by the number of cells, not of
    points.  Points with a non-finite coordinate are dropped (they are never drawn).
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    kept = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if kept.size == 0:
        return kept
    cx = np.floor((x[kept] - x[kept].min()) / (dx if dx > 0 else 1.0)).astype(np.int64)
    cy = np.floor((y[kept] - y[kept].min()) / (dy if dy > 0 else 1.0)).astype(np.int64)
    cell = cx * (int(cy.max()) + 1) + cy
    if lower is None or upper is None:
        return kept[np.unique(cell, return_index=True)[1]]
    yk = y[kept]
    low = np.where(np.isfinite(lower[kept]), lower[kept], yk)
    high = np.where(np.isfinite(upper[kept]), upper[kept], yk)
    chosen = []
    for key in (low, -high):
        order = np.lexsort((key, cell))         # by cell, then lowest end (highest) first
        first = np.flatnonzero(np.r_[True, np.diff(cell[order]) != 0])
        chosen.append(order[first])
    return kept[np.unique(np.concatenate(chosen))]


# --------------------------------------------------------------------------- time series
def time_series_input(calc: Calculation) -> str | None:
    """The name of the calculation's series input of times, if it has one."""
    for spec in calc.inputs:
        if spec.kind == "series" and spec.time:
            return spec.name
    return None


def series_key(calc: Calculation) -> str | None:
    """The key under which a response's ``series`` holds the time series input's values."""
    name = time_series_input(calc)
    if name is None:
        return None
    return getattr(calc.input(name), "label", None) or name


def has_curve(calc: Calculation) -> bool:
    """Whether the calculation gives radial velocities along a time series (e.g. an ephemeris)."""
    return time_series_input(calc) is not None and any(o.name == "rv1" for o in calc.outputs)


def _value(inputs: Mapping[str, Any], name: str) -> float | None:
    entry = inputs.get(name)
    v = entry.get("value") if isinstance(entry, dict) else None
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) else None


def nominal_body(calc: Calculation, response: Mapping[str, Any], request: Mapping[str, Any] | None,
                 times: np.ndarray) -> dict:
    """A request for the nominal values of the response's inputs at ``times`` (exact inputs, linear).

    The inputs echoed by a response are in canonical units, times in the response's time format,
    so the new request gives no units and the response's time format.
    """
    series_name = time_series_input(calc)
    body: dict[str, Any] = {}
    isotropic = False
    for spec in calc.inputs:
        entry = response.get("inputs", {}).get(spec.name)
        if spec.name == series_name:
            body[spec.name] = [float(t) for t in times]
            continue
        if not isinstance(entry, dict) or entry.get("default"):
            continue
        if spec.kind in ("choice", "integer"):
            body[spec.name] = entry["value"]
        elif entry.get("value") == "isotropic":
            body[spec.name] = "isotropic"
            isotropic = True
        elif spec.kind == "quantity":
            body[spec.name] = entry["value"]
    if request and isinstance(request.get("units"), dict):
        body["units"] = dict(request["units"])
    if response.get("time_format") == "mjd":       # the echoed times (and so the grid) are MJD
        body["time_format"] = "mjd"
    if isotropic:
        # random orientations need draws; the fewest a request may ask for serve the median curve
        body["uncertainty"] = {"method": "monte_carlo", "samples": MIN_DRAWS, "seed": 1}
    return body


def dense_times(times: np.ndarray, period: float | None, t_periastron: float | None,
                eccentricity: float | None) -> tuple[np.ndarray, str]:
    """A fine time grid for the curve and the x-axis mode ("time" or "phase").

    Over a few periods the grid spans the requested times (at least one full period);
    over many it is one period from periastron and the figure is drawn against phase.
    Points are spaced evenly in eccentric anomaly E: t = T0 + P (E - e sin E) / (2 pi).
    """
    times = np.asarray(times, dtype=float)
    lo, hi = float(np.min(times)), float(np.max(times))
    if period is None or not period > 0:
        pad = max(hi - lo, 1.0) * 0.05
        return np.linspace(lo - pad, hi + pad, 1200), "time"
    t0 = lo if t_periastron is None else t_periastron
    e = 0.0 if eccentricity is None else min(max(eccentricity, 0.0), 0.999)
    span = hi - lo
    if span > MAX_CYCLES_IN_TIME * period:
        ecc = np.linspace(0.0, 2.0 * np.pi, POINTS_PER_PERIOD + 1)
        if t0 + period > DATE.high:         # the cycle before: the same phases, dates a request may give
            t0 -= period * math.ceil((t0 + period - DATE.high) / period)
        grid = t0 + period * (ecc - e * np.sin(ecc)) / (2.0 * np.pi)
        return grid[(grid >= DATE.low) & (grid <= DATE.high)], "phase"
    if span < period:
        mid = 0.5 * (lo + hi)
        lo, hi = mid - 0.5 * period, mid + 0.5 * period
    else:
        pad = 0.03 * span
        lo, hi = lo - pad, hi + pad
    # the curve is computed by a request of its own, whose times are dates within the range a request may give
    lo, hi = max(lo, DATE.low), min(hi, DATE.high)
    first, last = math.floor((lo - t0) / period), math.ceil((hi - t0) / period)
    ecc = np.linspace(0.0, 2.0 * np.pi, POINTS_PER_PERIOD, endpoint=False)
    cycles = np.arange(first, last + 1)[:, None]
    grid = (t0 + period * (cycles + (ecc - e * np.sin(ecc)) / (2.0 * np.pi))).reshape(-1)
    grid = np.concatenate([grid, np.linspace(lo, hi, 400)])
    grid = np.unique(grid[(grid >= lo) & (grid <= hi)])
    return grid, "time"


def _series(response: Mapping[str, Any]) -> dict:
    return response.get("results", {}).get("series", {}) or {}


def _arr(entry: Mapping[str, Any] | None, key: str = "value") -> np.ndarray | None:
    if not entry or entry.get(key) is None:
        return None
    return np.array(entry[key], dtype=float)          # null -> NaN


def _errors(entry: Mapping[str, Any]) -> np.ndarray | None:
    v = _arr(entry)
    low, high = _arr(entry, "low"), _arr(entry, "high")
    if low is not None and high is not None:
        return np.vstack([v - low, high - v])
    return _arr(entry, "sigma")


def curve(calc: Calculation, response: Mapping[str, Any], request: Mapping[str, Any] | None, fmt: str,
          evaluate: Callable[[dict], Mapping[str, Any]]) -> bytes:
    """Radial-velocity curves of both stars with the requested times marked; the relative orbit
    on the sky beside them when the response has position angles and projected separations."""
    return figure_bytes(curve_figure(calc, response, request, evaluate), fmt)


def _marker_cells(width_in: float, height_in: float) -> tuple[int, int]:
    # cells across a figure this size whose diagonal is a marker's radius (an axes inside it has smaller ones)
    side = MARKER_SIZE / 2.0 / math.sqrt(2.0)
    return math.ceil(width_in * 72.0 / side), math.ceil(height_in * 72.0 / side)


def _span(*arrays: np.ndarray | None) -> float:
    values = np.concatenate([np.ravel(a) for a in arrays if a is not None])
    values = values[np.isfinite(values)]
    return float(np.ptp(values)) if values.size else 0.0


def _thinning_note(n: int, drawn: Mapping[str, int]) -> str:
    """A line saying how many of ``n`` requested points each layer draws, when one is thinned."""
    if all(count == n for count in drawn.values()):
        return ""
    counts = ", ".join(f"{label} {count:,}" for label, count in drawn.items())
    return (f"{n:,} requested times, {counts} markers drawn: the others lie under these, "
            "within the error bars drawn beside them")


def curve_figure(calc: Calculation, response: Mapping[str, Any], request: Mapping[str, Any] | None,
                 evaluate: Callable[[dict], Mapping[str, Any]]):
    """The matplotlib Figure drawn by :func:`curve` (its first axes: the radial velocities)."""
    series_name = series_key(calc)
    points = _series(response)
    times = _arr(points.get(series_name))
    if times is None or "rv1" not in points:
        raise PlotError("format", f"{calc.name} gave no radial velocities to plot for these inputs")
    inputs = response.get("inputs", {})
    period = _value(inputs, "period")
    grid, mode = dense_times(times, period, _value(inputs, "t_periastron"), _value(inputs, "eccentricity"))
    dense = _series(evaluate(nominal_body(calc, response, request, grid)))
    orbit = all(k in dense and k in points for k in ("position_angle", "projected_separation"))

    size = (12.0 if orbit else 8.0, 4.8)
    fig = _new_figure(*size)
    axes = fig.subplots(1, 2, width_ratios=(1.6, 1.0)) if orbit else [fig.add_subplot()]
    ax = axes[0]
    if mode == "phase":
        x_dense, x_points = _arr(dense["phase"]), _arr(points["phase"])
        order = np.argsort(x_dense)
        ax.set_xlabel("orbital phase since periastron")
        ax.set_xlim(0.0, 1.0)
    else:
        offset = math.floor(float(np.min(grid)) / 1e4) * 1e4 if np.min(grid) > 1e5 else 0.0
        x_dense, x_points = _arr(dense[series_name]) - offset, times - offset
        order = np.arange(len(x_dense))
        unit = points[series_name].get("unit", "d")
        ax.set_xlabel(f"JD − {offset:.0f} [{unit}]" if offset else f"JD [{unit}]")
        periastra = response.get("results", {}).get("events", {})
        periastra = periastra.get("periastron", []) if isinstance(periastra, dict) else []
        shown = False
        for ev in periastra:
            t = ev.get("value")
            if isinstance(t, (int, float)) and float(np.min(grid)) <= t <= float(np.max(grid)):
                ax.axvline(t - offset, color="#888888", linestyle=":", linewidth=1.0,
                           label=None if shown else "periastron")
                shown = True
    rv_unit = points["rv1"].get("unit", "")
    columns, rows = _marker_cells(*size)
    drawn: dict[str, int] = {}
    for k, (key, colour) in enumerate(zip(("rv1", "rv2"), STAR_COLOURS)):
        if key not in dense or key not in points:
            continue
        y = _arr(dense[key])
        ax.plot(x_dense[order], y[order], color=colour, linewidth=1.4, label=f"star {k + 1} ({key})")
        v, err = _arr(points[key]), _errors(points[key])
        marked = np.arange(v.size)
        if v.size > MAX_MARKERS:
            minus, plus = (err[0], err[1]) if err is not None and err.ndim == 2 else (err, err)
            lower, upper = (None, None) if err is None else (v - minus, v + plus)
            marked = marker_subset(x_points, v, _span(x_points) / columns, _span(v, lower, upper) / rows, lower, upper)
            if err is not None:
                err = err[..., marked]
        ax.errorbar(x_points[marked], v[marked], yerr=err, fmt="o", color=colour, markersize=MARKER_SIZE,
                    markeredgecolor="white", markeredgewidth=0.6, capsize=2.5, elinewidth=1.0,
                    rasterized=marked.size > MAX_MARKERS, label=f"requested times ({key})")
        drawn[key] = marked.size
    gamma = _value(inputs, "gamma")
    if gamma is not None and "gamma" in inputs:
        g_unit = inputs["gamma"].get("unit", rv_unit)
        try:
            g = gamma * (factor(g_unit, rv_unit) if g_unit and rv_unit and g_unit != rv_unit else 1.0)
            ax.axhline(g, color="#555555", linewidth=0.8, linestyle="--", label="systemic velocity")
        except Exception:
            pass
    ax.set_ylabel(f"radial velocity [{rv_unit}]")
    ax.legend(loc="best", fontsize=8, frameon=False)
    ax.grid(True, linewidth=0.3, alpha=0.5)
    if orbit:
        drawn["sky"] = _relative_orbit(axes[1], dense, points, size[1])
    ax.set_title(f"{calc.title}: radial velocities (positive receding)", fontsize=10)
    note = _thinning_note(times.size, drawn)
    if note:
        fig.supxlabel(note, fontsize=8, color="#444444")      # a footnote under the whole figure
    return fig


def _sky(entry_rho, entry_pa) -> tuple[np.ndarray, np.ndarray]:
    rho, pa = _arr(entry_rho), np.radians(_arr(entry_pa))
    # position angle from north through east: east offset rho sin(theta), north offset rho cos(theta)
    return rho * np.sin(pa), rho * np.cos(pa)


def _relative_orbit(ax, dense: Mapping[str, Any], points: Mapping[str, Any], height_in: float) -> int:
    """Draws the relative orbit on ``ax``; returns the number of requested points marked."""
    unit = dense["projected_separation"].get("unit", "")
    east, north = _sky(dense["projected_separation"], dense["position_angle"])
    ax.plot(east, north, color="#3b7a3b", linewidth=1.3, label="star 2 about star 1")
    pe, pn = _sky(points["projected_separation"], points["position_angle"])
    marked = np.arange(pe.size)
    if pe.size > MAX_MARKERS:
        # equal aspect: square cells, the wider span across at most the axes' height
        side = max(_span(pe), _span(pn)) / _marker_cells(height_in, height_in)[0]
        marked = marker_subset(pe, pn, side, side)
    ax.plot(pe[marked], pn[marked], "o", color="#3b7a3b", markersize=MARKER_SIZE, markeredgecolor="white",
            rasterized=marked.size > MAX_MARKERS, label="requested times")
    ax.plot([0.0], [0.0], marker="*", color="#222222", markersize=11, linestyle="none", label="star 1")
    sep = _arr(dense.get("separation"))
    if sep is not None and np.any(np.isfinite(sep)):
        k = int(np.nanargmin(sep))
        ax.plot([east[k]], [north[k]], marker="s", color="#c8501e", markersize=5, linestyle="none",
                label="periastron")
    finite = np.flatnonzero(np.isfinite(east) & np.isfinite(north))
    if finite.size > 8:
        a, b = finite[finite.size // 4], finite[finite.size // 4 + 2]
        ax.annotate("", xy=(east[b], north[b]), xytext=(east[a], north[a]),
                    arrowprops={"arrowstyle": "->", "color": "#3b7a3b", "lw": 1.4})
    ax.set_aspect("equal", adjustable="datalim")
    if not ax.xaxis_inverted():
        ax.invert_xaxis()               # east to the left, as on the sky
    ax.set_xlabel(f"east offset [{unit}]")
    ax.set_ylabel(f"north offset [{unit}]")
    ax.set_title("relative orbit on the sky (north up, east left)", fontsize=10)
    ax.legend(loc="best", fontsize=8, frameon=False)
    ax.grid(True, linewidth=0.3, alpha=0.5)
    return int(marked.size)
