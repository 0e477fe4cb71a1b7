"""`seqlang scan`: tables per point, points.csv, the result store; executors agree;
an interrupted scan (kill -9) resumes to the same store."""
from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
import xarray as xr

import seqlang
from seqlang.scan import store
from seqlang.scan.seeds import point_seed
from tests.conftest import ROOT

PAIR = """use "millpond.rig"
site a = na at (0, 0) um
scan r = 3 um .. 9 um points {n}
site b = na at (r, 0 um)
scan phase = [0 deg, 180 deg]
sequence pair {{
  pulse mw_na area pi/2
  pulse ryd_na duration 300 ns
  pulse mw_na area pi/2 phase phase
  image na -> bright
}}
expect a, b as |11>
"""
NOISY = dict(simulate=True, noise="intensity,decay", shots=8, seed=5, progress=False)


def _program(tmp_path, n=3) -> str:
    (tmp_path / "millpond.rig").write_text((ROOT / "programs/millpond.rig").read_text())
    path = tmp_path / "pair.seq"
    path.write_text(PAIR.format(n=n))
    return str(path)


def _cli(*args, cwd=ROOT, **kw):
    return subprocess.run([sys.executable, "-m", "seqlang", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=300, **kw)


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("serial")
    path = _program(tmp)
    return path, seqlang.scan(path, str(tmp / "out"), workers=1, **NOISY).load()


def test_store_is_labelled_with_coordinates_units_and_errors(serial):
    _, ds = serial
    assert dict(ds.sizes) == {"r": 3, "phase": 2}
    assert list(ds["r"].values) == [3, 6, 9] and ds["r"].attrs["units"] == "um"
    assert list(ds["phase"].values) == [0, 180] and ds["phase"].attrs["units"] == "deg"
    assert ds["P11_a_b"].attrs["ancillary_variables"] == "P11_a_b_error"
    assert np.all(ds["point_done"].values == 1)
    assert ds["point_seed"].values.ravel().tolist() == [point_seed(5, i) for i in range(6)]
    assert "intensity" in ds.attrs["options"] and ds.attrs["sources"]
    p = ds["P11_a_b"].values
    assert ds["P11_a_b_error"].values == pytest.approx(np.sqrt(p * (1 - p) / 8))


def test_pool_and_dask_give_the_serial_store(serial, tmp_path):
    path, expected = serial
    pool = seqlang.scan(path, str(tmp_path / "pool"), workers=2, **NOISY).load()
    xr.testing.assert_identical(pool, expected)
    dask = seqlang.scan(path, str(tmp_path / "dask"), scheduler="local", workers=2, dask_processes=False,
                        **NOISY).load()
    xr.testing.assert_identical(dask, expected)


def test_an_existing_dask_cluster_by_address(serial, tmp_path):
    from distributed import LocalCluster
    path, expected = serial
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        remote = seqlang.scan(path, str(tmp_path / "remote"), scheduler=cluster.scheduler_address, **NOISY).load()
    xr.testing.assert_identical(remote, expected)


def test_one_point_rerun_alone_gets_the_same_numbers(serial, tmp_path):
    path, expected = serial
    alone = seqlang.scan(path, str(tmp_path / "alone"), only=[4], workers=1, **NOISY).load()
    assert int(alone["point_done"].sum()) == 1
    assert expected["point_index"].values[2, 0] == 4  # r = 9 um, phase = 0 deg
    for name in ("fidelity_a_b", "P11_a_b", "bright_bright_a"):
        assert alone[name].values[2, 0] == expected[name].values[2, 0]
        assert np.isnan(alone[name].values[0, 0])


def test_tables_and_points_csv(tmp_path):
    path = _program(tmp_path)
    seqlang.scan(path, str(tmp_path / "out"), progress=False, workers=1)
    assert _cli("compile", "pair.seq", "--point", "5", "-o", "alone", cwd=tmp_path).returncode == 0
    for name in ("timing.csv", "timing.json", "waveforms.npz"):
        assert (tmp_path / "out/tables/0005" / name).read_bytes() == (tmp_path / "alone" / name).read_bytes()
    rows = (tmp_path / "out/points.csv").read_text().splitlines()
    assert rows[0].split(",")[:5] == ["index", "r [um]", "phase [deg]", "seed", "stored"]
    assert len(rows) == 7 and rows[6].split(",")[:5] == ["5", "9", "180", str(point_seed(1, 5)), "1"]
    digest = hashlib.sha256((tmp_path / "out/tables/0005/timing.json").read_bytes()).hexdigest()
    assert rows[6].split(",")[6] == digest


def test_existing_store_needs_resume_and_the_same_options(tmp_path):
    path = _program(tmp_path, n=1)
    seqlang.scan(path, str(tmp_path / "out"), progress=False, workers=1)
    again = _cli("scan", path, "-o", "out", cwd=tmp_path)
    assert again.returncode == 2 and "--resume" in again.stderr
    other = _cli("scan", path, "-o", "out", "--resume", "--seed", "9", cwd=tmp_path)
    assert other.returncode == 2 and "other sources or options" in other.stderr
    assert "Traceback" not in again.stderr + other.stderr


def test_kill_9_then_resume_equals_an_uninterrupted_scan(tmp_path):
    path = _program(tmp_path, n=10)
    args = [sys.executable, "-m", "seqlang", "scan", path, "--simulate", "--noise", "intensity", "--shots", "40",
            "--workers", "1", "--no-progress"]
    run = subprocess.Popen(args + ["-o", "cut"], cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    done_path = tmp_path / "cut" / store.STORE
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and run.poll() is None:
        if done_path.is_dir() and (done_path / "point_done" / ".zarray").exists():
            if store.done_mask(str(done_path)).sum() >= 3:
                break
        time.sleep(0.05)
    run.send_signal(signal.SIGKILL)
    run.wait(timeout=30)
    stored = int(store.done_mask(str(done_path)).sum())
    assert 3 <= stored < 20, "the scan must be cut in the middle"
    resumed = _cli(*args[3:], "-o", "cut", "--resume", cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert "20 of 20 points stored" in resumed.stdout
    seqlang.scan(path, str(tmp_path / "whole"), simulate=True, noise="intensity", shots=40, workers=1,
                 progress=False)
    xr.testing.assert_identical(store.open_dataset(str(done_path)).load(),
                                store.open_dataset(str(tmp_path / "whole" / store.STORE)).load())
    assert sorted(os.listdir(tmp_path / "cut/tables")) == sorted(os.listdir(tmp_path / "whole/tables"))


def test_plot_dir_draws_each_number(serial, tmp_path):
    path, _ = serial
    out = os.path.join(os.path.dirname(path), "out")
    result = _cli("plot", out, "-o", str(tmp_path / "plots"))
    assert result.returncode == 0, result.stderr
    drawn = sorted(os.listdir(tmp_path / "plots"))
    assert drawn == ["bright_bright.png", "fidelity_a_b.png", "levels_a.png", "levels_b.png",
                     "populations_a_b.png", "rydberg_loss_a_b.png"]
    assert (tmp_path / "plots/fidelity_a_b.png").stat().st_size > 1000
