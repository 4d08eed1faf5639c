"""`cloakrcs export`: a stored run as NetCDF (read back with scipy's own netCDF reader),
Touchstone one-ports (read back with scikit-rf) and CSV, and as a scikit-rf NetworkSet."""

from __future__ import annotations

import numpy as np
import pytest
import skrf
from scipy.io import netcdf_file
from skrf.networkSet import NetworkSet

from cloakrcs import export
from cloakrcs.cli import main
from cloakrcs.pipeline import run_process
from cloakrcs.store import load_result


@pytest.fixture
def stored_run(tiny_campaign, tmp_path):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    outcome = run_process(tiny_campaign, tmp_path / "out", store_url=url, report=False)
    return url, outcome


def test_netcdf_export_holds_the_calibrated_cubes_with_cf_attributes(stored_run, tmp_path, capsys):
    url, outcome = stored_run
    path = tmp_path / "run.nc"
    assert main(["export", str(outcome.run_id), "--format", "netcdf", "--out", str(path), "--store", url]) == 0
    assert "wrote 1 file(s)" in capsys.readouterr().out
    result = load_result(url, outcome.run_id)["result"]
    with netcdf_file(path, "r", mmap=False) as nc:  # scipy's NetCDF 3 reader, not xarray
        assert nc.Conventions == b"CF-1.8"
        for name, unit in (("amplitude_real", b"m"), ("sigma", b"m2"), ("floor", b"m2"), ("frequency", b"Hz"),
                           ("angle", b"degree"), ("repeatability_u", b"1"), ("reduction_db", b"dB")):
            assert nc.variables[name].units == unit, name
            assert nc.variables[name].long_name, name
        names = ["".join(c.decode() for c in row).rstrip("\x00") for row in nc.variables["target"][:]]
        assert names == list(result.targets)
        it = names.index("r1")
        amp = nc.variables["amplitude_real"][:] + 1j * nc.variables["amplitude_imag"][:]
        np.testing.assert_array_equal(amp[it], result.targets["r1"].amplitude.values)  # same pols/angles here
        np.testing.assert_array_equal(nc.variables["frequency"][:], result.frequency_hz)
        np.testing.assert_array_equal(nc.variables["valid_band"][:], result.valid_mask.astype(np.int8))
        np.testing.assert_allclose(nc.variables["sigma"][:][it], np.abs(amp[it]) ** 2, rtol=1e-15)
        np.testing.assert_array_equal(nc.variables["floor"][:][it], result.targets["r1"].floor.values)
        m = next(m for m in result.metrics if m["subject"] == "r1" and m["polarization"] == "VV")
        ip = ["".join(c.decode() for c in row).rstrip("\x00") for row in nc.variables["polarization"][:]].index("VV")
        assert nc.variables["band_reduction_uncertainty_db"][:][0, ip] == pytest.approx(
            m["band_reduction_uncertainty_db"], rel=1e-15)
        assert nc.variables["band_reduction_uncertainty_db"].coverage_factor == 2.0


def test_touchstone_export_is_read_by_scikit_rf_as_the_calibrated_amplitude(stored_run, tmp_path):
    url, outcome = stored_run
    out = tmp_path / "ts"
    assert main(["export", str(outcome.run_id), "--format", "touchstone", "--out", str(out), "--store", url]) == 0
    result = load_result(url, outcome.run_id)["result"]
    files = sorted(out.glob("*.s1p"))
    n = sum(t.amplitude.sizes["polarization"] * t.amplitude.sizes["angle"] for t in result.targets.values())
    assert len(files) == n and not list(out.glob(".*"))  # no staging left behind
    path = out / "r1_VV_-5deg.s1p"
    net = skrf.Network(str(path))  # scikit-rf 2.2 reading the exported file
    valid = result.valid_mask
    expected = result.targets["r1"].amplitude.sel(polarization="VV", angle=-5.0).values[valid]
    np.testing.assert_allclose(net.f, result.frequency_hz[valid], rtol=1e-15)
    np.testing.assert_allclose(net.s[:, 0, 0], expected, rtol=1e-13)  # S11 = A / (1 m)
    # |S11|^2 is sigma in m^2: the same dBsm as rcs.csv (rounded there to 4 decimals)
    import pandas as pd

    rcs = pd.read_csv(outcome.paths["rcs"])
    row = rcs[(rcs.target == "r1") & (rcs.polarization == "VV") & (rcs.angle_deg == -5.0)]
    np.testing.assert_allclose(10 * np.log10(np.abs(net.s[:, 0, 0]) ** 2), row.rcs_dbsm, atol=6e-5)
    text = path.read_text()
    assert "S11 = A / (1 m)" in text and "exp(+j w t)" in text


def test_csv_export_matches_the_process_outputs(stored_run, tmp_path):
    url, outcome = stored_run
    out = tmp_path / "csv"
    assert main(["export", str(outcome.run_id), "--format", "csv", "--out", str(out), "--store", url]) == 0
    for name in ("rcs.csv", "reduction.csv"):
        assert (out / name).read_bytes() == outcome.paths[name.split(".")[0]].read_bytes(), name
    import pandas as pd

    metrics = pd.read_csv(out / "metrics.csv")
    assert list(metrics.subject) == [m["subject"] for m in outcome.result.metrics]
    np.testing.assert_allclose(metrics.band_reduction_db, [m["band_reduction_db"] for m in outcome.result.metrics])


def test_network_set_from_python(stored_run):
    url, outcome = stored_run
    result = load_result(url, outcome.run_id)["result"]
    ns = export.network_set(result, "bare", "HH")
    assert isinstance(ns, NetworkSet) and len(ns) == 3
    amp = result.targets["bare"].amplitude.sel(polarization="HH").values[:, result.valid_mask]
    np.testing.assert_allclose(np.stack([n.s[:, 0, 0] for n in ns]), amp, rtol=1e-15)


@pytest.mark.parametrize("argv, words", [
    (["export", "999", "--format", "csv", "--out", "x"], "no run 999"),
    (["export", "1", "--format", "hdf", "--out", "x"], "invalid choice"),
])
def test_export_refusals_are_one_line(stored_run, tmp_path, capsys, argv, words):
    url, _ = stored_run
    with pytest.raises(SystemExit) if "hdf" in argv else _nothing():
        assert main(argv + ["--store", url]) == 2
    err = capsys.readouterr().err.strip()
    assert words in err and "\n" not in err and "Traceback" not in err


def test_export_onto_a_file_that_is_not_a_folder_is_refused(stored_run, tmp_path, capsys):
    url, outcome = stored_run
    target = tmp_path / "plain.txt"
    target.write_text("keep me\n")
    assert main(["export", str(outcome.run_id), "--format", "touchstone", "--out", str(target), "--store", url]) == 2
    assert "exists and is not a folder" in capsys.readouterr().err
    assert target.read_text() == "keep me\n"


class _nothing:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False
