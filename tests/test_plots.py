"""Figures: ?format=svg|png on the ephemeris (RV curves, relative orbit) and Monte Carlo histograms."""

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from scipy.optimize import brentq

from calcservice.core import compute
from calcservice.plots import PlotError, dense_times, nominal_body
from calcservice.registry import calculations

SB1_MC = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
          "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
          "inclination": {"value": 71.0, "sigma": 2.0},
          "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 11}}
# a fictional eccentric binary with a visual orbit
EPHEMERIS = {"period": {"value": 812.5, "sigma": 0.6}, "eccentricity": {"value": 0.64, "sigma": 0.01},
             "omega": {"value": 131.0, "sigma": 1.2}, "t_periastron": {"value": 2459870.4, "sigma": 0.9},
             "k1": {"value": 22.5, "sigma": 0.4}, "k2": {"value": 36.1, "sigma": 0.7}, "gamma": 4.2,
             "times": [2460100.5, 2460180.5, 2460260.5, 2460420.5]}
VISUAL = {"angular_semimajor_axis": {"value": 9.3, "sigma": 0.2}, "inclination": {"value": 62.0, "sigma": 1.5},
          "node": {"value": 48.0, "sigma": 1.0}}


def svg_text(data: bytes) -> str:
    root = ET.fromstring(data)          # well-formed XML
    return " ".join(t.strip() for t in root.itertext() if t.strip())


def test_histogram_of_monte_carlo_draws(client):
    r = client.post("/v1/spectroscopic/sb1?format=svg&plot=m2", json=SB1_MC)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"
    text = svg_text(r.data)
    assert "m2 [solMass]" in text and "number of draws" in text and "median" in text
    assert "68.27" in text and "2000 Monte Carlo draws" in text
    again = client.post("/v1/spectroscopic/sb1?format=svg&plot=m2", json=SB1_MC)
    assert again.data == r.data                     # same seed, same figure (no timestamps, stable ids)
    png = client.post("/v1/spectroscopic/sb1?format=png&plot=mass_ratio", json=SB1_MC)
    assert png.status_code == 200 and png.mimetype == "image/png" and png.data[:8] == b"\x89PNG\r\n\x1a\n"


def test_histogram_in_requested_units(client):
    body = {**SB1_MC, "units": {"semimajor_axis": "solRad"}}
    r = client.post("/v1/spectroscopic/sb1?format=svg&plot=semimajor_axis", json=body)
    assert r.status_code == 200 and "semimajor_axis [solRad]" in svg_text(r.data)


@pytest.mark.parametrize("query, status", [
    ("format=svg&plot=m2", 422),            # linear: no draws to plot
    ("format=svg&plot=nonsense", 400),      # not an output
    ("format=svg", 400),                    # sb1 has no curve: plot=NAME is needed
])
def test_figure_requests_that_cannot_be_drawn(client, query, status):
    body = {k: v for k, v in SB1_MC.items() if k != "uncertainty"}
    r = client.post(f"/v1/spectroscopic/sb1?{query}", json=body)
    assert r.status_code == status and r.mimetype == "application/problem+json"
    assert "plot" in r.get_json()["errors"]


def test_ephemeris_rv_curves(client):
    r = client.post("/v1/orbit/ephemeris?format=svg", json={**EPHEMERIS, "units": {"rv1": "m/s", "rv2": "m/s"}})
    assert r.status_code == 200, r.get_data(as_text=True)
    text = svg_text(r.data)
    assert "radial velocity [m/s]" in text                 # axes labelled with the response's units
    assert re.search(r"JD − 24\d{5} \[d\]", text)           # Julian Dates less a round offset
    assert "star 1 (rv1)" in text and "star 2 (rv2)" in text and "requested times (rv1)" in text
    assert "relative orbit" not in text


def test_ephemeris_with_visual_elements_draws_the_relative_orbit(client):
    r = client.post("/v1/orbit/ephemeris?format=png", json={**EPHEMERIS, **VISUAL})
    assert r.status_code == 200 and r.data[:4] == b"\x89PNG"
    svg = client.post("/v1/orbit/ephemeris?format=svg", json={**EPHEMERIS, **VISUAL})
    text = svg_text(svg.data)
    assert "relative orbit" in text and "east offset [mas]" in text and "north offset [mas]" in text


def test_ephemeris_histogram_of_a_series_is_refused(client):
    body = {**EPHEMERIS, "uncertainty": {"method": "monte_carlo", "samples": 200, "seed": 1}}
    r = client.post("/v1/orbit/ephemeris?format=svg&plot=rv1", json=body)
    assert r.status_code == 400 and "plot" in r.get_json()["errors"]


def _eccentric_anomaly(t, period, t0, e):
    # Kepler's equation M = E - e sin E, solved with scipy's brentq (an outside root finder)
    mean = 2 * math.pi * (t - t0) / period
    cycles = math.floor(mean / (2 * math.pi))
    m = mean - 2 * math.pi * cycles
    return brentq(lambda x: x - e * math.sin(x) - m, 0.0, 2 * math.pi) + 2 * math.pi * cycles


def test_dense_grid_is_even_in_eccentric_anomaly_and_covers_a_period():
    period, t0, e = 812.5, 2459870.4, 0.64
    grid, mode = dense_times(np.array([2460100.5, 2460180.5]), period, t0, e)
    assert mode == "time" and grid.max() - grid.min() >= period * (1 - 1e-9)
    ecc = np.array([_eccentric_anomaly(t, period, t0, e) for t in grid[::7]])
    steps = np.diff(ecc)
    # the E-spaced points dominate: no gap in E much wider than 2 pi / 720 (plus the even-in-time fill-in)
    assert steps.max() < 7 * 2 * math.pi / 720 * 1.05
    grid, mode = dense_times(np.array([2459000.5, 2463000.5]), period, t0, e)
    assert mode == "phase" and grid.min() == pytest.approx(t0) and grid.max() == pytest.approx(t0 + period)


def test_dense_curve_passes_through_the_requested_points():
    calc = calculations()["ephemeris"]
    body = {**EPHEMERIS, "time_format": "jd"}
    response = compute("ephemeris", body)
    times = np.array(response["results"]["series"]["time"]["value"])
    nominal = compute("ephemeris", nominal_body(calc, response, body, times))
    for key in ("rv1", "rv2"):
        assert nominal["results"]["series"][key]["value"] == pytest.approx(
            response["results"]["series"][key]["value"], rel=1e-12)


# --------------------------------------------------------------------------- cost bounded by the figure, not the request
LONG_SERIES = 100_000       # the limit max_series allows by default


def _long_ephemeris() -> dict:
    # two periods of the fictional binary, sampled far more densely than any figure can show
    return {**EPHEMERIS, "times": list(np.linspace(2460000.5, 2460000.5 + 2 * 812.5, LONG_SERIES))}


def test_svg_of_a_long_ephemeris_stays_small(client):
    r = client.post("/v1/orbit/ephemeris?format=svg", json=_long_ephemeris())
    assert r.status_code == 200, r.get_data(as_text=True)[:300]
    assert len(r.data) < 2_000_000                      # 102 MB when every requested point was drawn
    text = svg_text(r.data)
    assert "star 1 (rv1)" in text and "requested times (rv1)" in text
    assert re.search(r"100,000 requested times, rv1 [\d,]+, rv2 [\d,]+ markers drawn", text)   # said, not hidden


def _by_label(ax, label):
    return next(line for line in ax.get_lines() if line.get_label() == label)


def test_long_ephemeris_figure_shows_every_requested_point():
    from scipy.spatial import cKDTree

    from calcservice.plots import MARKER_SIZE, MAX_MARKERS, curve_figure

    calc = calculations()["ephemeris"]
    body = _long_ephemeris()
    response = compute("ephemeris", body)
    fig = curve_figure(calc, response, body, lambda b: compute("ephemeris", b))
    fig.draw_without_rendering()
    ax = fig.axes[0]
    offset = float(re.search(r"JD − (\d+)", ax.get_xlabel()).group(1))
    series = response["results"]["series"]
    times = np.array(series["time"]["value"]) - offset
    radius = MARKER_SIZE / 2 * fig.dpi / 72                 # half a marker, in display pixels
    for k, key in enumerate(("rv1", "rv2")):
        rv = np.array(series[key]["value"])
        sigma = np.array(series[key]["sigma"])
        # the model curve passes through the service's own values at the requested times, periastron included
        x, y = _by_label(ax, f"star {k + 1} ({key})").get_data()
        picks = np.r_[np.linspace(0, LONG_SERIES - 1, 9).astype(int), np.argmax(rv), np.argmin(rv)]
        amplitude = np.ptp(rv)
        assert np.interp(times[picks], x, y) == pytest.approx(rv[picks], abs=2e-3 * amplitude)
        # the requested points are thinned, and each one lies under a drawn marker
        bars = next(c for c in ax.containers if c.get_label() == f"requested times ({key})")
        drawn_x, drawn_y = bars.lines[0].get_data()
        assert 0 < len(drawn_x) < LONG_SERIES / 10
        assert bars.lines[0].get_rasterized() == (len(drawn_x) > MAX_MARKERS)
        drawn = ax.transData.transform(np.column_stack([drawn_x, drawn_y]))
        every = ax.transData.transform(np.column_stack([times, rv]))
        distance, _ = cKDTree(drawn).query(every)
        assert distance.max() <= radius
        # the error bars drawn reach as far as all the requested points' bars
        segments = np.concatenate(bars.lines[2][0].get_segments())
        assert segments[:, 1].max() == pytest.approx((rv + sigma).max(), rel=1e-12)
        assert segments[:, 1].min() == pytest.approx((rv - sigma).min(), rel=1e-12)


def test_few_requested_points_are_all_drawn(client):
    from calcservice.plots import curve_figure

    calc = calculations()["ephemeris"]
    response = compute("ephemeris", EPHEMERIS)
    fig = curve_figure(calc, response, EPHEMERIS, lambda b: compute("ephemeris", b))
    bars = next(c for c in fig.axes[0].containers if c.get_label() == "requested times (rv1)")
    assert len(bars.lines[0].get_xdata()) == len(EPHEMERIS["times"]) and not bars.lines[0].get_rasterized()
    assert fig.get_supxlabel() == ""                    # no thinning, no footnote


def test_marker_subset_keeps_each_cells_extremes():
    from calcservice.plots import marker_subset

    rng = np.random.default_rng(5)
    x, y = rng.uniform(0, 10, 3000), rng.normal(0, 3, 3000)
    lower, upper = y - rng.uniform(0, 1, 3000), y + rng.uniform(0, 1, 3000)
    y[7] = np.nan                                       # never drawn, so never kept
    kept = marker_subset(x, y, 0.5, 0.25, lower, upper)
    assert 7 not in kept and len(kept) == len(set(kept))
    # reference: the cells grouped one point at a time, in plain Python
    cells = {}
    for i in range(len(x)):
        if np.isfinite(y[i]):
            cells.setdefault((int((x[i] - x.min()) // 0.5), int((y[i] - np.nanmin(y)) // 0.25)), []).append(i)
    assert len(kept) <= 2 * len(cells)
    kept_cells = {}
    for i in kept:
        kept_cells.setdefault((int((x[i] - x.min()) // 0.5), int((y[i] - np.nanmin(y)) // 0.25)), []).append(i)
    assert kept_cells.keys() == cells.keys()
    for cell, members in cells.items():
        assert min(lower[i] for i in kept_cells[cell]) == min(lower[i] for i in members)
        assert max(upper[i] for i in kept_cells[cell]) == max(upper[i] for i in members)


def test_histogram_bins_of_heavy_tailed_draws_are_counted_before_they_are_made():
    from calcservice.plots import MAX_BINS, histogram, histogram_bins

    rng = np.random.default_rng(8)
    normal = rng.normal(3.0, 0.2, 5000)
    # within the cap the bins are numpy's own Freedman-Diaconis bins
    assert np.array_equal(histogram_bins(normal), np.histogram_bin_edges(normal, bins="fd"))
    # a tail like a mass at a nearly face-on inclination (m ~ 1/sin^3 i): numpy's rule would ask
    # for ~1e18 edges; here the bins are capped before any is made
    heavy = 1.0 / rng.uniform(0.0, 1.0, 200_000) ** 3
    edges = histogram_bins(heavy)
    assert len(edges) == MAX_BINS + 1 and edges[0] == heavy.min() and edges[-1] == heavy.max()
    entry = {"value": float(np.median(heavy)), "low": float(np.percentile(heavy, 15.865)),
             "high": float(np.percentile(heavy, 84.135)), "unit": "solMass"}
    svg = histogram("m2", heavy, entry, "svg")
    assert "200000 Monte Carlo draws" in svg_text(svg)
    # draws wider than a float can span: a problem naming plot (numpy overflowed into a 500 before)
    with pytest.raises(PlotError) as e:
        histogram_bins(np.array([-1e308, 0.0, 1e308]))
    assert e.value.field == "plot"
