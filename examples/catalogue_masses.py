"""From an ECSV catalogue of double-lined binaries to a plot of their masses with error bars.

The catalogue is fictional: the double-lined binaries of the "Lantern Reach" survey, a demo
scenario of our own, written here as an ECSV file with units and a few masked entries (a
missing semi-amplitude, an inclination not yet measured).  Only the public API is used: an
astropy table goes into ``Client.batch`` and comes back as a ``QTable`` with units, sigmas, a
mask for the systems that could not be answered and an ``error`` column saying why.

    python examples/catalogue_masses.py                         # the service in-process
    python examples/catalogue_masses.py --url http://127.0.0.1:8000 --systems 5000 --out masses.png
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from astropy import units as u
from astropy.table import MaskedColumn, QTable

from calcservice.client import Client


def lantern_reach_catalogue(n: int, seed: int = 2026) -> QTable:
    """``n`` fictional SB2 systems with measured orbits (values and 1-sigma uncertainties)."""
    rng = np.random.default_rng(seed)
    m1 = rng.uniform(1.0, 12.0, n)                              # solar masses, for making up the orbits
    m2 = m1 * rng.uniform(0.3, 1.0, n)
    period = 10 ** rng.uniform(0.3, 3.0, n)                     # days
    e = np.where(period < 5, 0.0, rng.uniform(0.0, 0.7, n))
    incl = np.degrees(np.arccos(rng.uniform(0.05, 0.6, n)))     # inclined enough for a visual orbit
    # K1 = (2 pi G / P)^(1/3) m2 sin i / (m1 + m2)^(2/3) / sqrt(1 - e^2) (Hilditch 2001, ch. 2)
    k_scale = 212.9 * (m1 + m2) ** (1 / 3) / period ** (1 / 3) / np.sqrt(1 - e ** 2) * np.sin(np.radians(incl))
    k1, k2 = k_scale * m2 / (m1 + m2), k_scale * m1 / (m1 + m2)
    t = QTable()
    t["star"] = [f"LR-{k:05d}" for k in range(n)]
    t["period"] = period * u.d
    t["period_sigma"] = period * 2e-5 * u.d
    t["k1"] = MaskedColumn(k1, unit=u.km / u.s, mask=rng.uniform(size=n) < 0.02)
    t["k1_sigma"] = np.maximum(0.3, 0.02 * k1) * u.km / u.s
    t["k2"] = k2 * u.km / u.s
    t["k2_sigma"] = np.maximum(0.4, 0.03 * k2) * u.km / u.s
    t["eccentricity"] = e
    t["eccentricity_sigma"] = np.where(e > 0, 0.01, 0.0)
    t["inclination"] = MaskedColumn(incl, unit=u.deg, mask=rng.uniform(size=n) < 0.05)
    t["inclination_sigma"] = rng.uniform(0.5, 3.0, n) * u.deg
    return t


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--url", default="local", help="a running service (default: in-process)")
    p.add_argument("--systems", type=int, default=300, help="how many fictional systems")
    p.add_argument("--catalogue", default="lantern_reach.ecsv", help="where to write the ECSV catalogue")
    p.add_argument("--out", default="lantern_reach_masses.png", help="where to save the plot")
    args = p.parse_args(argv)

    lantern_reach_catalogue(args.systems).write(args.catalogue, overwrite=True)
    catalogue = QTable.read(args.catalogue)                     # units and masks as the file has them

    svc = Client(args.url)
    results = svc.batch("sb2", catalogue, keep=["star"]).to_table()
    failed = np.flatnonzero(results["error"] != "")
    answered = ~results["m1"].mask            # without an inclination only m sin^3 i comes back
    print(f"{len(results) - len(failed)} of {len(results)} systems answered, {answered.sum()} with masses; "
          f"{len(failed)} refused:")
    for k in failed[:5]:
        print(f"  {results['star'][k]}: {results['error'][k]}")

    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    ok = results[answered]
    fig, ax = plt.subplots(figsize=(6, 5))
    ax.errorbar(ok["m1"].unmasked.to_value(u.solMass), ok["m2"].unmasked.to_value(u.solMass),
                xerr=ok["m1_sigma"].unmasked.to_value(u.solMass), yerr=ok["m2_sigma"].unmasked.to_value(u.solMass),
                fmt="o", ms=3, lw=0.8, alpha=0.7)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel(f"M1 [{u.solMass.to_string('latex')}]")
    ax.set_ylabel(f"M2 [{u.solMass.to_string('latex')}]")
    ax.set_title(f"Lantern Reach (fictional): {len(ok)} double-lined binaries")
    fig.tight_layout()
    fig.savefig(args.out, dpi=120)
    print(f"plot -> {Path(args.out).resolve()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
