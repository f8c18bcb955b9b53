"""Sensitivity cases and Monte Carlo replicates as Dask tasks (yieldscape/parallel.py,
``yieldscape run --workers N`` / ``--scheduler ADDRESS``): the same tables and files as the
run in one process, a killed worker's task run again, bad settings named.

The reference is the serial run of the same command (today's code path: one process, one
generator drawn replicate after replicate); the equality can fail, as another seed changes the
Monte Carlo table. One cluster of two worker processes serves the module (about 3-10 s to
start on a loaded 2-core machine)."""

import contextlib
import io
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import yieldscape
from yieldscape.cli.main import main
from yieldscape.parallel import CONNECT_TIMEOUT_S, SCHEDULER_ENV, Parallel

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

distributed = pytest.importorskip("distributed")

ROOT = Path(__file__).resolve().parents[1]
CASES = [
    {"name": "band", "set": {"flow.band": 0.1}},
    {"name": "older", "set": {"species.pine.min_harvest_age": 70}},
    {"name": "no-dist", "set": {"disturbance.annual_rate": 0.0, "disturbance.replicates": 0}},
]


def _scenario(directory: Path, seed: int = 3, cases: list = CASES) -> Path:
    """Thirty 1-ha pine stands aged 0..145 with disturbance, 6 replicates and the cases."""
    n = 30
    layer = directory / "stands.gpkg"
    if not layer.exists():
        write_layer(layer, squares(n), stand_attrs(n, np.arange(n) * 5))
    raw = scenario_dict(
        layer,
        disturbance={"annual_rate": 0.005, "replicates": 6, "seed": seed},
        sensitivity=cases,
    )
    return write_scenario(directory / f"scenario-{seed}.toml", raw)


def _run(args: list[str]) -> tuple[int, str]:
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        code = main(args)
    return code, err.getvalue()


def _csvs(out: Path) -> dict[str, bytes]:
    return {str(p.relative_to(out)): p.read_bytes() for p in sorted(out.rglob("*.csv"))}


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, dashboard_address=":0"
    ) as c:
        yield c


@pytest.fixture(scope="module")
def forest(tmp_path_factory):
    """The scenario and its serial run's outputs (the reference)."""
    d = tmp_path_factory.mktemp("forest")
    scenario = _scenario(d)
    code, err = _run(["run", str(scenario), "--out", str(d / "serial")])
    assert code == 0, err
    return scenario, d / "serial"


def test_cases_and_replicates_on_a_cluster_write_the_serial_files(forest, cluster, tmp_path):
    scenario, serial = forest
    out = tmp_path / "dask"
    code, err = _run(
        ["run", str(scenario), "--out", str(out), "--scheduler", cluster.scheduler_address]
    )
    assert code == 0, err
    assert "Dask: 2 workers; dashboard http" in err
    files = _csvs(out)
    assert files == _csvs(serial)  # byte for byte, the cases' folders included
    assert {"monte_carlo.csv", "band/wood_flow.csv", "older/monte_carlo.csv"} <= set(files)
    # each case's log lines are in the run's log, named, in the serial order
    log = (out / "run.log").read_text()
    assert log.index("sensitivity case 'band' (1 of 3)") < log.index("case 'band': verdict")
    assert log.index("case 'band': verdict") < log.index("sensitivity case 'older' (2 of 3)")
    assert (out / "older" / "run.log").read_text().count("case 'older': verdict") == 1


def test_the_library_gives_the_serial_tables(forest, cluster, tmp_path):
    scenario = yieldscape.load_scenario(forest[0])
    serial = yieldscape.run(scenario, None)
    tasks = yieldscape.run(scenario, None, parallel=Parallel(scheduler=cluster.scheduler_address))
    pd.testing.assert_frame_equal(tasks.monte_carlo, serial.monte_carlo, check_exact=True)
    assert list(tasks.cases) == [c["name"] for c in CASES]
    for name, case in serial.cases.items():
        for table in ("wood_flow", "indicators", "monte_carlo", "harvests"):
            mine, theirs = getattr(tasks.cases[name], table), getattr(case, table)
            if theirs is None:
                assert mine is None
            else:
                pd.testing.assert_frame_equal(mine, theirs, check_exact=True)
    # another seed gives another table: the equality above is not that of a constant
    other = yieldscape.load_scenario(_scenario(tmp_path, seed=4, cases=[]))
    mc = yieldscape.run(other, None).monte_carlo
    assert not mc.equals(serial.monte_carlo)


def test_a_chunk_starts_where_the_serial_generator_is():
    # numpy: PCG64.advance(k) is k draws of 64 bits; Generator.random takes one per double
    rng = np.random.default_rng(11)
    rng.random(1234)
    moved = np.random.Generator(np.random.PCG64(11).advance(1234))
    assert np.array_equal(rng.random(50), moved.random(50))


class _KillOnce(distributed.WorkerPlugin):
    """Ends the worker process at the start of its first yieldscape task (once, the marker
    file says), as a crash or an out-of-memory kill would."""

    def __init__(self, marker: str) -> None:
        self.marker = marker

    def transition(self, key, start, finish, **kwargs):  # noqa: ANN001, ANN201
        if finish == "executing" and "_logged" in str(key) and not os.path.exists(self.marker):
            Path(self.marker).write_text(str(os.getpid()))
            os._exit(1)


def test_a_killed_worker_is_replaced_and_the_result_is_the_same(forest, cluster, tmp_path):
    scenario, serial = forest
    marker = tmp_path / "killed"
    with distributed.Client(cluster) as client:
        client.register_plugin(_KillOnce(str(marker)), name="kill-once")
        try:
            out = tmp_path / "dask"
            args = ["run", str(scenario), "--out", str(out)]
            code, err = _run([*args, "--scheduler", cluster.scheduler_address])
        finally:
            client.unregister_worker_plugin("kill-once")
        client.wait_for_workers(2, timeout=60)
    assert code == 0, err
    assert marker.exists()  # a worker was killed mid-run
    assert _csvs(out) == _csvs(serial)


def test_workers_starts_a_local_cluster(forest, tmp_path):
    scenario, serial = forest
    out = tmp_path / "local"
    code, err = _run(["run", str(scenario), "--out", str(out), "--workers", "2"])
    assert code == 0, err
    assert "Dask: 2 workers; dashboard http" in err
    assert _csvs(out) == _csvs(serial)


@pytest.mark.parametrize(
    ("flags", "message"),
    [
        (["--workers", "0"], "--workers 0: must be a whole number of processes >= 1"),
        (["--workers", "-3"], "--workers -3: must be a whole number of processes >= 1"),
        (["--workers", "100000"], "--workers 100000: at most 256 local processes"),
        (["--workers", "2", "--scheduler", "tcp://127.0.0.1:9"], "give one of them"),
        (["--scheduler", "nonsense"], "--scheduler 'nonsense': no Dask scheduler reached"),
        (["--scheduler", "tcp://127.0.0.1:9"], "--scheduler 'tcp://127.0.0.1:9': no Dask"),
    ],
)
def test_bad_settings_are_input_errors(small_case, flags, message, monkeypatch):
    monkeypatch.setattr("yieldscape.parallel.CONNECT_TIMEOUT_S", 1.0)
    d, _, scenario = small_case
    code, err = _run(["run", str(scenario), "--out", str(d / "out"), *flags])
    assert code == 2
    assert message in err and "Traceback" not in err
    assert not (d / "out").exists()


def test_a_workers_value_that_is_no_number_is_refused(small_case, capsys):
    d, _, scenario = small_case
    with pytest.raises(SystemExit) as exc:
        main(["run", str(scenario), "--out", str(d / "out"), "--workers", "two"])
    assert exc.value.code == 2
    assert "argument --workers: 'two' is not a whole number" in capsys.readouterr().err
    assert not (d / "out").exists()


def test_the_environment_variable_names_the_scheduler(small_case, monkeypatch):
    monkeypatch.setattr("yieldscape.parallel.CONNECT_TIMEOUT_S", 1.0)
    monkeypatch.setenv(SCHEDULER_ENV, "tcp://127.0.0.1:9")
    d, _, scenario = small_case
    code, err = _run(["run", str(scenario), "--out", str(d / "out")])
    assert code == 2
    assert f"{SCHEDULER_ENV} 'tcp://127.0.0.1:9': no Dask scheduler reached" in err
    assert not (d / "out").exists()
    assert CONNECT_TIMEOUT_S == 10.0  # the default the patch above shortened


def test_without_dask_the_message_says_what_to_install(small_case, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if not installed
    d, _, scenario = small_case
    code, err = _run(["run", str(scenario), "--out", str(d / "out"), "--workers", "2"])
    assert code == 2
    assert 'pip install "yieldscape[parallel]"' in err and "--workers" in err
    assert not (d / "out").exists()


def test_a_run_in_one_process_does_not_load_dask(small_case):
    d, _, scenario = small_case
    code = (
        "import sys; from yieldscape.cli.main import main; "
        f"assert main(['run', {str(scenario)!r}, '--out', {str(d / 'out')!r}, '-q']) == 0; "
        "assert not {'dask', 'distributed'} & set(sys.modules), 'dask imported'"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop(SCHEDULER_ENV, None)
    done = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


def test_each_case_is_written_by_its_task_and_comes_back_small(forest, cluster, tmp_path):
    # pipeline.run_case: a case's folder is written where it ran; the base keeps its record
    # and tables by period, not its stand layers (results.without_stands)
    scenario = yieldscape.load_scenario(forest[0])
    serial = yieldscape.run(scenario, None)
    out = tmp_path / "out"
    tasks = yieldscape.run(scenario, out, parallel=Parallel(scheduler=cluster.scheduler_address))
    for name, case in tasks.cases.items():
        assert case.written is not None
        assert set(case.written["outputs"]) == {p.name for p in (out / name).iterdir()}
        assert len(case.stands) == len(case.harvests) == len(case.inventory.stands) == 0
        assert case.stand_ages is None and not case.flow.simulation.snapshots
        assert len(serial.cases[name].stands) == 30  # the serial run keeps them whole
        pd.testing.assert_frame_equal(case.wood_flow, serial.cases[name].wood_flow)
        assert case.verdict == serial.cases[name].verdict
    assert serial.cases["band"].written is None
