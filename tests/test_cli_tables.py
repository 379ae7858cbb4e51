"""``calcservice compute --in FILE --out FILE``: catalogues in CSV, ECSV, FITS and VOTable through astropy's
table I/O, units from the file, masked entries answered in place, split to the limits, a summary by reason."""

import json

import numpy as np
import pytest
from astropy import units as u
from astropy.table import MaskedColumn, QTable, Table

from calcservice.cli import main
from calcservice.client import Client

FORMATS = {"csv": "ascii.csv", "ecsv": "ascii.ecsv", "fits": "fits", "vot": "votable"}


def fictional_catalogue(n: int, seed: int = 11) -> QTable:
    """A fictional catalogue of SB1 systems of our own scenario, with a few entries masked."""
    rng = np.random.default_rng(seed)
    t = QTable()
    t["star"] = [f"Fict-{k}" for k in range(n)]
    t["period"] = rng.uniform(2.0, 900.0, n) * u.d
    t["period_sigma"] = rng.uniform(0.5, 5.0, n) * u.h                    # a sigma in its own unit
    t["k1"] = rng.uniform(5.0, 90.0, n) * u.km / u.s
    t["k1_sigma"] = rng.uniform(0.1, 1.0, n) * u.km / u.s
    t["eccentricity"] = MaskedColumn(rng.uniform(0.0, 0.8, n), mask=np.arange(n) % 50 == 7)
    t["primary_mass"] = MaskedColumn(rng.uniform(0.8, 3.0, n), unit=u.solMass, mask=np.arange(n) % 9 == 4)
    return t


def write_input(t: QTable, path, fmt: str) -> None:
    if fmt == "csv":
        # plain CSV: units in the headers, as NAME[unit]
        plain = Table(masked=True)
        for name in t.colnames:
            col = t[name]
            unit = getattr(col, "unit", None)
            values = col.value if hasattr(col, "value") and unit is not None else col
            plain[f"{name}[{unit}]" if unit is not None and name != "star" else name] = values
        plain.write(path, format="ascii.csv", overwrite=True)
    else:
        Table(t, masked=True).write(path, format=FORMATS[fmt], overwrite=True)


def run(capsys, *argv):
    code = main(["compute", *argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def reference():
    t = fictional_catalogue(60)
    return t, Client("local").batch("sb1", t, keep=["star"])


@pytest.mark.parametrize("fmt_in", list(FORMATS))
@pytest.mark.parametrize("fmt_out", list(FORMATS))
def test_every_format_in_and_out(tmp_path, capsys, reference, fmt_in, fmt_out):
    t, expected = reference
    src, dst = tmp_path / f"cat.{fmt_in}", tmp_path / f"results.{fmt_out}"
    write_input(t, src, fmt_in)
    code, _, err = run(capsys, "sb1", "--in", str(src), "--out", str(dst), "--id", "star")
    assert code == 0, err
    back = Table.read(dst, format=FORMATS[fmt_out])
    assert list(back["star"]) == list(t["star"])
    # the same numbers as the client's own batch of the same table (to the digits each format keeps)
    if fmt_out == "csv":
        m2_min, unit = back["m2_min[solMass]"], u.solMass
    else:
        m2_min, unit = back["m2_min"], back["m2_min"].unit
    assert unit == u.solMass
    got = np.ma.filled(np.ma.asarray(m2_min, dtype=float), np.nan)
    np.testing.assert_allclose(got, expected["m2_min"], rtol=1e-12, equal_nan=True)
    failed = expected.failed
    assert failed == [k for k in range(60) if k % 50 == 7]
    errors = [str(e) if not np.ma.is_masked(e) else "" for e in back["error"]]
    assert all("eccentricity: is required" in errors[k] for k in failed)
    assert f"{60 - len(failed)} of 60 systems computed" in err


@pytest.mark.parametrize("fmt", ["csv", "fits"])
def test_kept_columns_come_back_as_they_were(tmp_path, capsys, reference, fmt):
    # --keep (alias --id) carries any number of columns, as ?keep= does over HTTP: a name stays text, a
    # catalogue number an integer, and the numbers are those of the same table without them
    t, expected = reference
    t = t.copy()
    t["hip"] = np.arange(60, dtype=np.int64) * 1000 + 17
    src, dst = tmp_path / f"cat.{fmt}", tmp_path / f"results.{fmt}"
    write_input(t, src, fmt)
    code, _, err = run(capsys, "sb1", "--in", str(src), "--out", str(dst), "--keep", "star,hip")
    assert code == 0, err
    back = Table.read(dst, format=FORMATS[fmt])
    assert back.colnames[:2] == ["star", "hip"]
    assert list(back["star"]) == list(t["star"]) and back["hip"].dtype.kind == "i"
    assert list(back["hip"]) == list(t["hip"])
    m2_min = back["m2_min[solMass]"] if fmt == "csv" else back["m2_min"]
    got = np.ma.filled(np.ma.asarray(m2_min, dtype=float), np.nan)
    np.testing.assert_allclose(got, expected["m2_min"], rtol=1e-12, equal_nan=True)
    # the same with the option given twice, the old name for one of them
    code, _, err = run(capsys, "sb1", "--in", str(src), "--out", str(dst), "--id", "star", "--keep", "hip")
    assert code == 0, err
    assert Table.read(dst, format=FORMATS[fmt]).colnames[:2] == ["star", "hip"]


def test_a_kept_column_the_file_lacks_is_one_line(tmp_path, capsys):
    fictional_catalogue(5).write(tmp_path / "cat.ecsv")
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "cat.ecsv"), "--out", str(tmp_path / "o.csv"),
                       "--keep", "star,hd")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--keep" in err and "'hd'" in err
    assert not (tmp_path / "o.csv").exists()
    with pytest.raises(SystemExit) as stop:                   # argparse's own error, one line
        run(capsys, "sb1", "--in", str(tmp_path / "cat.ecsv"), "--out", str(tmp_path / "o.csv"), "--keep", "star,,hd")
    err = capsys.readouterr().err
    assert stop.value.code == 2 and "--keep" in err and "comma-separated" in err


def test_units_come_from_the_file(tmp_path, capsys):
    # astropy: 41.6 d = 998.4 h; 23.4 km/s = 23400 m/s
    t = QTable({"period": [998.4] * u.h, "k1": [23400.0] * u.m / u.s, "eccentricity": [0.31]})
    t.write(tmp_path / "hours.ecsv")
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "hours.ecsv"), "--out", str(tmp_path / "o.ecsv"))
    assert code == 0, err
    ours = QTable.read(tmp_path / "o.ecsv")["mass_function"][0]
    plain = Client("local").calculate("sb1", period=41.6, k1=23.4, eccentricity=0.31).quantity("mass_function")
    # plain columns (a masked one only where a system failed), as the service's ECSV answer has them
    assert ours.to_value(u.solMass) == pytest.approx(plain.to_value(u.solMass), rel=1e-12)


def test_unknown_output_format_is_one_line_and_nothing_is_computed(tmp_path, capsys):
    fictional_catalogue(5).write(tmp_path / "cat.ecsv")
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "cat.ecsv"), "--out", str(tmp_path / "o.xlsx"),
                       "--id", "star")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--out" in err and ".xlsx" in err
    assert not (tmp_path / "o.xlsx").exists()


def test_a_fits_table_is_read(tmp_path, capsys):
    Table(fictional_catalogue(5), masked=True).write(tmp_path / "cat.fits")
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "cat.fits"), "--out", str(tmp_path / "o.csv"),
                       "--id", "star")
    assert code == 0 and "5 of 5 systems computed" in err


@pytest.mark.parametrize("ext", ["csv", "ecsv"])
def test_a_cell_beyond_a_double_is_read_as_the_service_reads_it(tmp_path, capsys, ext):
    # 1e-400 is no 0 (astropy's reader makes it one): a period of it is refused as below the smallest
    # normal double, an eccentricity of it is the 0 it rounds to, as in a table sent to the service
    src = tmp_path / f"tiny.{ext}"
    Table({"period": ["1e-400", "41.6"], "k1": [23.4, 23.4], "eccentricity": ["0.3", "1e-400"]}).write(src)
    if ext == "csv":
        src.write_text(src.read_text().replace('"', ""))
    else:
        src.write_text(src.read_text().replace("string", "float64").replace('"', ""))
    code, _, err = run(capsys, "sb1", "--in", str(src), "--out", str(tmp_path / "o.csv"))
    assert code == 0, err
    out = Table.read(tmp_path / "o.csv", format="ascii.csv")
    assert "below the smallest normal double" in out["error"][0]
    plain = Client("local").calculate("sb1", period=41.6, k1=23.4, eccentricity=0.0)
    assert out["mass_function[solMass]"][1] == plain["results"]["mass_function"]["value"]


def test_summary_groups_failures_by_reason(tmp_path, capsys):
    src = tmp_path / "cat.csv"
    src.write_text("period,k1,eccentricity\n41.6,23.4,0.3\n-1,23.4,0.3\n-2,23.4,0.3\n12.0,23.4,\n")
    code, _, err = run(capsys, "sb1", "--in", str(src), "--out", str(tmp_path / "o.csv"))
    assert code == 0
    assert "1 of 4 systems computed; 3 failed: period: must be > 0 (in d) (2); eccentricity: is required (1)" in err


def test_a_long_catalogue_is_split_to_the_limit_with_a_progress_bar(tmp_path, capsys, monkeypatch, reference):
    monkeypatch.setenv("CALCSERVICE_MAX_BATCH_ROWS", "300")
    t = fictional_catalogue(2000, seed=3)
    write_input(t, tmp_path / "big.ecsv", "ecsv")
    import calcservice.commandline as cl
    calls = []
    real = cl.run_batch
    monkeypatch.setattr(cl, "run_batch", lambda *a: calls.append(len(a[1]["columns"]["period"]["value"])) or real(*a))
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "big.ecsv"), "--out", str(tmp_path / "o.ecsv"),
                       "--id", "star", "--progress")
    assert code == 0 and max(calls) <= 300 and sum(calls) == 2000
    assert "/2000" in err and "system" in err             # tqdm's bar on standard error
    back = QTable.read(tmp_path / "o.ecsv")
    monkeypatch.delenv("CALCSERVICE_MAX_BATCH_ROWS")
    whole = Client("local").batch("sb1", t, keep=["star"])          # one request: the default limit
    got = np.where(back["m2_min"].mask, np.nan, back["m2_min"].unmasked.to_value(u.solMass))
    np.testing.assert_array_equal(got, whole["m2_min"])


def test_an_unreadable_file_is_one_line(tmp_path, capsys):
    (tmp_path / "bad.fits").write_bytes(b"not a FITS file\x00\x01")
    code, _, err = run(capsys, "sb1", "--in", str(tmp_path / "bad.fits"), "--out", str(tmp_path / "o.csv"))
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--in" in err and "bad.fits" in err


@pytest.mark.parametrize("fmt", ["fits", "vot"])
def test_a_catalogue_of_ephemerides_keeps_its_series_and_events(tmp_path, capsys, fmt):
    # FITS and VOTable hold an array per cell (CSV and ECSV are refused, as the service refuses them)
    src = tmp_path / "eph.csv"
    src.write_text("period,eccentricity,omega,t_periastron,k1\n812.5,0.64,131,2459870.4,22.5\n"
                   "300,0.2,40,2459000.5,10\n")
    code, _, err = run(capsys, "ephemeris", "--in", str(src), "--out", str(tmp_path / f"o.{fmt}"),
                       "times=2460100.5,2460180.5")
    assert code == 0, err
    back = Table.read(tmp_path / f"o.{fmt}", format=FORMATS[fmt])
    one = Client("local").calculate("ephemeris", period=812.5, eccentricity=0.64, omega=131.0,
                                    t_periastron=2459870.4, k1=22.5, times=[2460100.5, 2460180.5])
    rv1 = list(back["rv1"][0])
    np.testing.assert_allclose(rv1, one["results"]["series"]["rv1"]["value"], rtol=1e-12)
    assert json.loads(back["events"][0])
