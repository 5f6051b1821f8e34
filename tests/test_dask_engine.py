"""The fit on a Dask cluster: the same model and data hash as on one machine, also when
blocks split files midway and a worker dies mid-run; errors as on one machine.

The cluster is a LocalCluster of three single-threaded worker processes
(started once for this module, closed after it); the CLI cases connect to it
by its address, as a user connects to a running cluster.
"""
from __future__ import annotations

import fcntl
import logging
import os
import pty
import re
import signal
import struct
import subprocess
import sys
import termios
import threading
import time
from contextlib import contextmanager

import distributed
import numpy as np
import pytest
from conftest import run_affix
from scale_data import COLUMNS, INPUTS, OUTPUTS, fleet_frame, log_rows, write_csv, write_parquet

import affix
from affix.errors import DataError
from affix.fit.dask_engine import DaskEngine
from affix.intake import read_files
from affix.model import Model


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=3, threads_per_worker=1, processes=True, dashboard_address=None,
                                       death_timeout="10s", silence_logs=logging.CRITICAL)
    with cluster, distributed.Client(cluster, set_as_default=False) as connected:
        yield connected


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    """Eight files of three formats, 251,004 rows in all: CSVs of several tiles of
    the statistics (so blocks cut tiles), one with a row left out and one of 3
    rows; a Parquet file of several row groups and a Parquet dataset folder;
    a .npz."""
    folder = tmp_path_factory.mktemp("logs")
    rng = np.random.default_rng(2026)
    files = []
    for k, rows in enumerate([70_000, 45_000, 40_001, 3]):  # a tiny file too: its rows spread over the folds
        path = folder / f"run{k}.csv"
        write_csv(path, log_rows(rng, rows))
        files.append(path)
    text = files[1].read_text().splitlines()
    text[20_000] = "1,2,,4,5.0,6.0"  # an empty cell: left out with drop_invalid, its place kept
    files[1].write_text("\n".join(text) + "\n")
    write_parquet(folder / "line.parquet", log_rows(rng, 60_000), row_group_size=7_000)
    dataset = folder / "dataset"
    (dataset / "day=1").mkdir(parents=True)
    (dataset / "day=2").mkdir()
    write_parquet(dataset / "day=1" / "part-0.parquet", log_rows(rng, 20_000), row_group_size=5_000)
    write_parquet(dataset / "day=2" / "part-0.parquet", log_rows(rng, 15_000), row_group_size=5_000)
    (dataset / "_SUCCESS").write_text("")
    rows = log_rows(rng, 1_000)
    np.savez(folder / "spare.npz", **{name: rows[:, j] for j, name in enumerate(COLUMNS)})
    return [*files, folder / "line.parquet", dataset, folder / "spare.npz"]


class Watched:
    """A progress bar (see affix.progress) that records what it is told: the total, and
    the bytes done as each block finishes; ``on_update(blocks done)`` runs at each."""

    def __init__(self, on_update=lambda blocks: None):
        self.total, self.done, self.on_update = None, [], on_update

    @contextmanager
    def __call__(self, total, label, unit="unit"):
        self.total = total

        def update(done):
            self.done.append(done)
            self.on_update(len(self.done))

        yield update


def fit(data, engine, **options):
    return affix.fit([str(p) for p in data], INPUTS, OUTPUTS, drop_invalid=True, engine=engine, **options)


def assert_same_model(dask: Model, local: Model):
    for name in ("gain", "offset", "error_covariance", "rms", "cv_rms", "input_mean", "input_covariance"):
        ours, reference = getattr(dask, name), getattr(local, name)
        # The contract: 1e-12 relative.
        np.testing.assert_allclose(ours, reference, rtol=1e-12, atol=0, err_msg=name)
        # What the fixed merge tree of affix.statistics.runs gives on one machine: every bit.
        np.testing.assert_array_equal(ours, reference, err_msg=name)
    np.testing.assert_array_equal(dask.input_min, local.input_min)
    np.testing.assert_array_equal(dask.input_max, local.input_max)
    assert (dask.n_samples, dask.dropped_rows, dask.data_sha256) == (local.n_samples, local.dropped_rows,
                                                                      local.data_sha256)


def test_the_model_and_hash_on_dask_equal_the_single_machine_ones_when_blocks_split_files(client, logs):
    local = fit(logs, "local")
    watched = Watched()
    on_dask = fit(logs, DaskEngine(client, block_bytes=256 << 10, bar=watched))
    # 8 files (the dataset folder holds two); 256 KB blocks cut every CSV into several, mid-tile.
    assert len(watched.done) >= 25 and watched.done[-1] == watched.total
    assert_same_model(on_dask, local)
    # And the fit itself is right: numpy's least squares on all the rows (numpy.linalg.lstsq).
    rows = np.vstack([np.vstack(list(read_files([p], COLUMNS, drop_invalid=True))) for p in logs])
    design = np.column_stack([rows[:, :4], np.ones(len(rows))])
    solution = np.linalg.lstsq(design, rows[:, 4:], rcond=None)[0]
    np.testing.assert_allclose(on_dask.gain, solution[:4].T, rtol=1e-9)
    assert on_dask.n_samples == len(rows) == 251_004 - 1 and on_dask.dropped_rows == 1


def test_a_npy_file_is_split_by_rows_with_the_same_result(client, tmp_path):
    path = tmp_path / "bench.npy"
    np.save(path, log_rows(np.random.default_rng(3), 50_000))
    columns = [str(j) for j in range(6)]
    local = affix.fit(str(path), columns[:4], columns[4:])
    watched = Watched()
    on_dask = affix.fit(str(path), columns[:4], columns[4:], engine=DaskEngine(client, block_bytes=100_000, bar=watched))
    assert len(watched.done) == 25  # 2,400,128 bytes (the header too) in row ranges of about 100 KB
    assert_same_model(on_dask, local)


def test_a_worker_killed_mid_run_is_replaced_and_the_result_does_not_change(client, logs):
    local = fit(logs[:3], "local", folds=7)
    workers = client.run(os.getpid)  # address -> pid
    victim = sorted(workers.values())[0]
    killed = []

    def kill_once(blocks_done):
        if not killed:  # the pass is under way: the other blocks are queued or running
            os.kill(victim, signal.SIGKILL)
            killed.append(blocks_done)

    on_dask = fit(logs[:3], DaskEngine(client, block_bytes=64 << 10, bar=Watched(kill_once)), folds=7)
    assert killed and killed[0] < 40  # it died with most of the pass still to run
    assert_same_model(on_dask, local)
    client.wait_for_workers(3, timeout=60)  # the nanny starts a new worker process in its place
    assert victim not in client.run(os.getpid).values()


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("edit, expected", [  # {line as an editor numbers it: its new text}
    ({30_002: "1,2,seven,4,5.0,6.0"}, r"run1.csv, line 30002, column 'b3': not a number: 'seven'"),
    ({30_002: "1,2,3,4,nan,6.0", 44_000: ""}, r"run1.csv, line 30002: 2 row\(s\) hold NaN, infinite or empty values"),
])
def test_a_bad_cell_in_one_block_is_the_single_machine_error(client, logs, tmp_path, edit, expected):
    path = tmp_path / "run1.csv"
    write_csv(path, log_rows(np.random.default_rng(9), 45_000))
    lines = path.read_text().splitlines()
    for line, text in edit.items():
        lines[line - 1] = text
    path.write_text("\n".join(lines) + "\n")
    data = [logs[0], path, logs[2]]
    with pytest.raises(DataError, match=expected) as single:
        affix.fit([str(p) for p in data], INPUTS, OUTPUTS)
    with pytest.raises(DataError) as on_dask:
        affix.fit([str(p) for p in data], INPUTS, OUTPUTS, engine=DaskEngine(client, block_bytes=128 << 10))
    assert on_dask.value.message == single.value.message
    # The same through the CLI: one line, exit status 2.
    arguments = ["fit", *data, "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS), "--out", tmp_path / "m.json"]
    local_cli = run_affix(*arguments)
    dask_cli = run_affix(*arguments, "--engine", "dask", "--scheduler", client.scheduler.address)
    assert dask_cli.returncode == local_cli.returncode == 2
    assert dask_cli.stderr == local_cli.stderr and len(dask_cli.stderr.splitlines()) == 1, dask_cli.stderr
    assert not (tmp_path / "m.json").exists()


def test_the_cli_on_a_running_cluster_writes_the_same_model_file(client, logs, tmp_path):
    arguments = ["fit", *logs, "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS), "--drop-invalid"]
    local = run_affix(*arguments, "--out", tmp_path / "local.json")
    dask = run_affix(*arguments, "--engine", "dask", "--scheduler", client.scheduler.address,
                     "--out", tmp_path / "dask.json")
    assert local.returncode == dask.returncode == 0, dask.stderr
    assert (tmp_path / "dask.json").read_bytes() == (tmp_path / "local.json").read_bytes()
    assert dask.stderr == local.stderr  # on a pipe: no progress bar, only the note about the row left out


@pytest.mark.bad_input("fit")
def test_an_unreachable_scheduler_is_one_line_and_status_4(tmp_path, logs):
    import socket

    with socket.socket() as probe:  # a port that nothing listens on
        probe.bind(("127.0.0.1", 0))
        address = f"tcp://127.0.0.1:{probe.getsockname()[1]}"
    result = run_affix("fit", logs[0], "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS), "--engine",
                       "dask", "--scheduler", address, "--out", tmp_path / "m.json",
                       env={**os.environ, "DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT": "2s"})
    assert result.returncode == 4
    assert result.stderr.startswith(f"affix: error: --scheduler: cannot reach the Dask scheduler at {address} (")
    assert len(result.stderr.splitlines()) == 1 and not (tmp_path / "m.json").exists()
    # A build names the project key that gave the address, and writes no build folder.
    import colour_sensor

    colour_sensor.write_log(tmp_path / "colour.csv")
    colour_sensor.write_project(tmp_path, extra=f'\n[fit]\nengine = "dask"\nscheduler = "{address}"\n')
    built = run_affix("build", cwd=tmp_path, env={**os.environ, "DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT": "2s"})
    assert built.returncode == 4 and built.stdout == ""
    assert built.stderr.startswith(f"affix: error: fit.scheduler: cannot reach the Dask scheduler at {address} (")
    assert len(built.stderr.splitlines()) == 1 and not (tmp_path / "build").exists()


@pytest.mark.bad_input("fit")
def test_a_scheduler_without_the_dask_engine_is_refused(tmp_path, logs):
    result = run_affix("fit", logs[0], "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS),
                       "--scheduler", "tcp://127.0.0.1:8786", "--out", tmp_path / "m.json")
    assert result.returncode == 2
    assert result.stderr == "affix: error: --scheduler: names a Dask scheduler, which only the dask engine uses\n"


@pytest.mark.bad_input("fit")
def test_without_dask_installed_the_dask_engine_says_what_to_install(tmp_path, logs):
    # A Python in which 'import distributed' fails, as it does where the extra is not installed.
    code = "import sys; sys.modules['distributed'] = None; from affix.workflow.cli import main; sys.exit(main())"
    result = subprocess.run(
        [sys.executable, "-c", code, "fit", str(logs[0]), "--inputs", ",".join(INPUTS), "--outputs",
         ",".join(OUTPUTS), "--engine", "dask", "--out", str(tmp_path / "m.json")],
        capture_output=True, text=True,
    )
    assert result.returncode == 4
    assert result.stderr == "affix: error: the Dask engine needs dask.distributed: pip install 'affix[dask]'\n"


def test_progress_shows_on_a_terminal_and_is_gone_at_the_end(client, logs, tmp_path):
    leader, follower = pty.openpty()
    fcntl.ioctl(follower, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))  # a terminal of 100 columns
    received = []
    reader = threading.Thread(target=lambda: received.append(_read_all(leader)))
    reader.start()
    result = subprocess.run(
        [sys.executable, "-m", "affix", "fit", *map(str, logs[:3]), "--inputs", ",".join(INPUTS), "--outputs",
         ",".join(OUTPUTS), "--drop-invalid", "--engine", "dask", "--scheduler", client.scheduler.address,
         "--out", str(tmp_path / "m.json")],
        stdout=subprocess.PIPE, stderr=follower, text=True,
    )
    os.close(follower)
    reader.join()
    os.close(leader)
    assert result.returncode == 0
    shown = received[0].decode()
    size = sum(os.path.getsize(p) for p in logs[:3])
    # tqdm's bar, counting the bytes of the blocks read ...
    assert "\rfitting on Dask :   0%|" in shown and f"| 0.00/{size / 1e6:.2f}M [" in shown
    # ... then erased, so the line that stays is the command's own note.
    assert re.search(r"\r {20,}\raffix: note: left out 1 row\(s\) holding NaN, infinite or empty values\r\n$", shown)


def test_without_an_address_a_cluster_is_started_and_shut_down(logs, tmp_path):
    child = subprocess.Popen(
        [sys.executable, "-m", "affix", "fit", str(logs[2]), "--inputs", ",".join(INPUTS), "--outputs",
         ",".join(OUTPUTS), "--engine", "dask", "--out", str(tmp_path / "m.json")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True,
    )
    out, err = child.communicate(timeout=120)
    assert child.returncode == 0 and err == "", err
    local = affix.fit(str(logs[2]), INPUTS, OUTPUTS)
    np.testing.assert_array_equal(Model.load(tmp_path / "m.json").gain, local.gain)
    # No process of the command's session (nannies, workers) outlives it: within a few seconds
    # every one has ended (a process being reaped as the command exits is no survivor).
    deadline = time.monotonic() + 10
    while _alive_in_session(child.pid) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert _alive_in_session(child.pid) == []


def _alive_in_session(session: int) -> list[int]:
    import psutil

    alive = []
    for process in psutil.process_iter():
        try:
            if os.getsid(process.pid) == session and process.status() != psutil.STATUS_ZOMBIE:
                alive.append(process.pid)
        except (OSError, psutil.Error):  # ended meanwhile
            continue
    return alive


def _read_all(fd) -> bytes:
    data = b""
    while True:
        try:
            block = os.read(fd, 4096)
        except OSError:  # the other end closed
            return data
        if not block:
            return data
        data += block


def test_a_project_built_on_dask_is_the_local_build_byte_for_byte(client, tmp_path):
    import colour_sensor
    from conftest import require

    require("gcc")  # the verification step builds the emitted C
    folders = {}
    for engine in ("local", "dask"):
        folder = folders[engine] = tmp_path / engine
        folder.mkdir()
        colour_sensor.write_log(folder / "colour.csv")
        keys = f'engine = "dask"\nscheduler = "{client.scheduler.address}"\n' if engine == "dask" else ""
        colour_sensor.write_project(folder, vectors=2_000, extra=f"\n[fit]\n{keys}\n[build]\nreport = false\n")
        done = run_affix("build", cwd=folder)
        assert done.returncode == 0, done.stderr
    built = [sorted((p.relative_to(f / "build"), p.read_bytes()) for p in (f / "build").iterdir())
             for f in folders.values()]
    assert built[0] == built[1] and len(built[0]) >= 6


def test_a_fleet_log_on_dask_gives_every_unit_the_single_machine_model(client, tmp_path):
    # Per-unit statistics grouped on the unit column inside each block, merged per unit.
    from affix.fleet.fit import fit_fleet

    frame = fleet_frame(np.random.default_rng(12), units=40, rows_per_unit=1_500)
    files = [tmp_path / "line-a.csv", tmp_path / "line-b.csv", tmp_path / "line-c.parquet"]
    thirds = [frame.iloc[k * 20_000 : (k + 1) * 20_000] for k in range(3)]
    for path, part in zip(files[:2], thirds):
        part.to_csv(path, index=False, float_format="%.6f")
    part = thirds[2].astype({name: np.int32 for name in INPUTS})
    part.to_parquet(files[2], row_group_size=2_500, index=False)
    local = fit_fleet(files, INPUTS, OUTPUTS, "serial", folds=5)
    watched = Watched()
    on_dask = fit_fleet(files, INPUTS, OUTPUTS, "serial", folds=5,
                        engine=DaskEngine(client, block_bytes=150_000, bar=watched))
    assert len(watched.done) >= 10  # blocks split the files, and with them the units' rows
    assert on_dask.units == local.units == tuple(f"SN{k:04d}" for k in range(1, 41))
    assert on_dask.rows == local.rows and on_dask.data_sha256 == local.data_sha256
    for unit in local.units:
        assert_same_model(on_dask.models[unit], local.models[unit])
    assert_same_model(on_dask.pooled, local.pooled)
    # And each unit is right: numpy's least squares on its own rows (numpy.linalg.lstsq).
    rows = frame[frame.serial == "SN0007"]
    design = np.column_stack([rows[INPUTS].to_numpy(float), np.ones(len(rows))])
    solution = np.linalg.lstsq(design, rows[OUTPUTS].to_numpy(float), rcond=None)[0]
    np.testing.assert_allclose(on_dask.models["SN0007"].gain, solution[:4].T, rtol=1e-9)


def test_a_fleet_built_on_dask_is_the_local_fleet_build_byte_for_byte(client, tmp_path):
    # The project's fit.engine reaches the fleet's per-unit pass: fleet.csv and every unit's record agree.
    from conftest import require
    from test_fleet_build import INIT, batch

    require("gcc")
    require("micropython")
    built = {}
    for engine in ("local", "dask"):
        folder = tmp_path / engine
        folder.mkdir()
        batch(folder)
        cluster = ["--engine", "dask", "--scheduler", client.scheduler.address] if engine == "dask" else []
        assert run_affix("init", "batch.csv", *INIT, *cluster, cwd=folder).returncode == 0
        done = run_affix("build", "--quiet", cwd=folder)
        assert f'\nengine = "{engine}"\n' in (folder / "affix.toml").read_text()
        assert done.returncode == 3, done.stderr  # the batch's out-of-tolerance unit, on both engines
        built[engine] = sorted((p.relative_to(folder / "build"), p.read_bytes())
                               for p in (folder / "build").rglob("*") if p.is_file())
    assert built["dask"] == built["local"]
    assert len([name for name, _ in built["dask"] if name.suffix == ".bin"]) == 7
