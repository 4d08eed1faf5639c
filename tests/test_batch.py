"""process-many: local processes and a Dask LocalCluster give the numbers of a serial process_campaign."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from cloakrcs.batch import expand_manifests, process_many
from cloakrcs.campaign import load_campaign
from cloakrcs.cli import main
from cloakrcs.process import ProcessSettings, process_campaign
from cloakrcs.simulate import simulate_campaign


def _config(name: str, seed: int, radius_m: float) -> dict:
    angles = {"start": -20.0, "stop": 20.0, "step": 10.0}
    return {
        "seed": seed, "campaign": {"name": name, "prototype": "batch test"},
        "chamber": {"range_m": 3.0}, "sweep": {"start_ghz": 8.0, "stop_ghz": 12.0, "points": 101, "ports": 2},
        "angles": angles, "noise": {"level_db": -70.0},
        "gate": {"span_m": 0.5, "window": "kaiser", "kaiser_beta": 6.0}, "output": {"truth": False},
        "target": [
            {"name": "empty", "role": "background", "model": "empty"},
            {"name": "sphere", "role": "reference", "model": "sphere", "radius_m": radius_m},
            {"name": "bare", "role": "subject", "model": "bare_cylinder", "radius_m": 0.04, "length_m": 0.2},
            {"name": "r1", "role": "subject", "model": "coated_cylinder", "baseline": "bare", "revision": "R1",
             "radius_m": 0.04, "length_m": 0.2, "thickness_m": 0.0015, "eps_r": [12.0, -0.3],
             "mu_r": [1.5, -1.0]},
        ],
    }


@pytest.fixture(scope="module")
def campaigns(tmp_path_factory):
    root = tmp_path_factory.mktemp("archive")
    good = []
    for k, radius in enumerate((0.0762, 0.0508)):
        simulate_campaign(_config(f"camp{k}", 10 + k, radius), root / f"c{k}")
        good.append(root / f"c{k}" / "manifest.toml")
    broken = root / "broken" / "manifest.toml"
    simulate_campaign(_config("broken", 3, 0.0762), broken.parent)
    next((broken.parent / "raw").glob("bare_*.s2p")).unlink()  # a sweep missing from the grid
    serial = {m: process_campaign(load_campaign(m)) for m in good}
    return good, broken, serial


def _check_equal(outcome, serial, out_dir):
    """Same numbers as a serial process_campaign, in memory and in the written rcs.csv."""
    for name, t in serial.targets.items():
        np.testing.assert_allclose(outcome.result.targets[name].amplitude.values, t.amplitude.values, rtol=1e-12)
    assert [m["band_reduction_db"] for m in outcome.result.metrics] == pytest.approx(
        [m["band_reduction_db"] for m in serial.metrics], rel=1e-12)
    # pandas reading the written CSV: the serial result's table, to the 4 decimals of dB written
    rcs = pd.read_csv(out_dir / "rcs.csv")
    np.testing.assert_allclose(rcs["rcs_dbsm"].to_numpy(), serial.rcs_table()["rcs_dbsm"].to_numpy(),
                               atol=0.5e-4 + 1e-12)
    assert json.loads((out_dir / "summary.json").read_text())["campaign"] == serial.campaign


def _run_and_check(outcomes, good, broken, serial, out_root):
    by_manifest = {o.manifest: o for o in outcomes}
    assert len(outcomes) == 3
    bad = by_manifest[str(broken.resolve())]
    assert not bad.ok and "missing" in bad.error and "\n" not in bad.error
    for m in good:
        o = by_manifest[str(m.resolve())]
        assert o.ok, o.error
        _check_equal(o, serial[m], out_root / serial[m].campaign)


def test_local_processes(campaigns, tmp_path):
    good, broken, serial = campaigns
    outcomes = process_many(expand_manifests([*map(str, good), str(broken)]), tmp_path, ProcessSettings(),
                            workers=2, report=False)
    _run_and_check(outcomes, good, broken, serial, tmp_path)


def test_dask_local_cluster(campaigns, tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    good, broken, serial = campaigns
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as cl, \
            distributed.Client(cl) as client:
        outcomes = process_many([*good, broken], tmp_path, ProcessSettings(), scheduler=client, report=False)
    _run_and_check(outcomes, good, broken, serial, tmp_path)


def test_command_glob_store_and_exit_status(campaigns, tmp_path, capsys):
    good, broken, serial = campaigns
    root = good[0].parent.parent
    url = f"sqlite:///{tmp_path / 'store.db'}"
    status = main(["process-many", str(root / "*" / "manifest.toml"), "--out-root", str(tmp_path / "out"),
                   "--workers", "2", "--store", url, "--no-report"])
    err = capsys.readouterr().err
    assert status == 2  # one campaign failed
    assert err.count("FAILED") == 1 and "broken" in err
    for m in good:
        assert (tmp_path / "out" / serial[m].campaign / "rcs.csv").exists()
    from cloakrcs import store
    runs = store.list_runs(url)
    assert sorted(r["campaign"] for r in runs) == sorted(s.campaign for s in serial.values())
