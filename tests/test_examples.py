"""The example scripts run, in-process, on a small fictional catalogue."""

import importlib.util
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def test_catalogue_masses_example_makes_its_plot(tmp_path, capsys):
    spec = importlib.util.spec_from_file_location("catalogue_masses", EXAMPLES / "catalogue_masses.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    out = tmp_path / "masses.png"
    assert module.main(["--systems", "40", "--catalogue", str(tmp_path / "cat.ecsv"), "--out", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    printed = capsys.readouterr().out
    assert "of 40 systems answered" in printed and (tmp_path / "cat.ecsv").read_text().startswith("# %ECSV")


def test_the_example_recovers_the_masses_it_made_up():
    # the script makes K1, K2 from chosen masses with K = 212.9 km/s (M/Msun)^(1/3) (P/d)^(-1/3)
    # (from memory; (2 pi GM_sun / 1 d)^(1/3) = 212.9 km/s with IAU 2015 GM_sun): the service must give them back
    import numpy as np
    from astropy import units as u

    from calcservice.client import Client
    spec = importlib.util.spec_from_file_location("catalogue_masses", EXAMPLES / "catalogue_masses.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    t = module.lantern_reach_catalogue(30, seed=4)
    rng = np.random.default_rng(4)
    m1 = rng.uniform(1.0, 12.0, 30)                 # the same draws, in the same order, as the script's
    out = Client("local").batch("sb2", t, keep=["star"]).to_table()
    ok = ~out["m1"].mask
    np.testing.assert_allclose(out["m1"].unmasked.to_value(u.solMass)[ok], m1[ok], rtol=2e-3)


def test_the_package_says_it_is_typed_and_ships_the_marker():
    # PEP 561: a py.typed file in the package, shipped as package data
    import tomllib
    root = EXAMPLES.parent
    assert (root / "calcservice" / "py.typed").exists()
    pyproject = tomllib.loads((root / "pyproject.toml").read_text())
    assert "py.typed" in pyproject["tool"]["setuptools"]["package-data"]["calcservice"]
