"""Faults around a run: where the output goes, a full disk, signals, a second run into the same
folder, paths that cannot be used. Each case asserts the exit code, a message naming the path
or key, no traceback and nothing written (no output, no staged sibling left behind)."""

import errno
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from yieldscape.cli.main import main
from yieldscape.publish import MANAGED

from helpers import (
    scenario_dict,
    small_case_files,
    squares,
    stand_attrs,
    write_layer,
    write_scenario,
)

DRAWN = {"figures": True}  # faults while writing the figures are among the cases


@pytest.fixture
def small_case(tmp_path):
    """The shared small case (conftest), drawing its figures."""
    layer, _ = small_case_files(tmp_path)
    return (
        tmp_path,
        layer,
        write_scenario(tmp_path / "scenario.toml", scenario_dict(layer, report=DRAWN)),
    )


STAGED = (".partial", ".old", ".probe")


def fails(capsys, args, pattern, code=2):
    """Run the command; it exits ``code`` with one error line matching ``pattern``."""
    assert main(args) == code
    err = capsys.readouterr().err
    assert "Traceback" not in err, err
    errors = [line for line in err.splitlines() if line.startswith("yieldscape: error:")]
    assert len(errors) == 1, err
    assert re.search(pattern, errors[0]), err
    return err


def nothing_left(root, *outs):
    """No output directory and no staged or probing entry anywhere under ``root``."""
    for out in outs:
        assert not os.path.lexists(out), out
    left = [p for p in root.rglob("*") if p.name.startswith(".") and p.name.endswith(STAGED)]
    assert not left, left


def can_write_into(directory):
    """Whether this process can make an entry in ``directory`` (root can, whatever its mode)."""
    probe = directory / f"probe-{uuid.uuid4().hex}"
    try:
        probe.mkdir()
    except PermissionError:
        return False
    probe.rmdir()
    return True


@pytest.fixture(scope="module")
def _earlier_template(tmp_path_factory):
    """The small forest's files and a run of it, with a case, into results/: made once."""
    root = tmp_path_factory.mktemp("earlier")
    layer = write_layer(root / "stands.gpkg", squares(20), stand_attrs(20, ages=np.arange(20) * 5))
    write_scenario(root / "scenario.toml", scenario_dict(layer, report=DRAWN))
    assert main(["run", str(with_a_case(root, layer)), "--out", str(root / "results"), "-q"]) == 0
    return root


@pytest.fixture
def earlier(_earlier_template, tmp_path):
    """A copy of it: (folder, scenario without cases, results/ of the earlier run)."""
    shutil.copytree(_earlier_template, tmp_path, dirs_exist_ok=True)
    return tmp_path, tmp_path / "scenario.toml", tmp_path / "results"


# -- the output location is checked before any work --------------------------------------------


@pytest.mark.parametrize("command", ["run", "curves"])
def test_out_under_a_file_is_refused_before_any_work(small_case, capsys, command):
    tmp_path, layer, scenario = small_case
    out = layer / "out"  # inside the input file's own path
    err = fails(
        capsys,
        [command, str(scenario), "--out", str(out)],
        rf"--out {re.escape(str(out))}: {re.escape(str(layer))} is a file, not a directory",
    )
    assert "read and check inventory" not in err  # found before the inventory is read
    nothing_left(tmp_path)


def test_out_two_levels_under_a_file(small_case, capsys):
    tmp_path, _, scenario = small_case
    (tmp_path / "notes.txt").write_text("mine")
    out = tmp_path / "notes.txt" / "a" / "b"
    fails(capsys, ["run", str(scenario), "--out", str(out)], r"notes.txt is a file, not a dir")
    assert (tmp_path / "notes.txt").read_text() == "mine"
    nothing_left(tmp_path)


def test_out_that_is_the_input_file(small_case, capsys):
    tmp_path, layer, scenario = small_case
    before = layer.read_bytes()
    fails(capsys, ["run", str(scenario), "--out", str(layer)], r"exists and is not a directory")
    fails(capsys, ["curves", str(scenario), "--out", str(scenario)], r"is not a directory")
    assert layer.read_bytes() == before
    nothing_left(tmp_path)


@pytest.mark.parametrize("command", ["run", "curves", "compare"])
def test_out_in_a_read_only_directory(small_case, capsys, command):
    tmp_path, _, scenario = small_case
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        if can_write_into(locked):
            pytest.skip("this process writes into a read-only directory anyway (root)")
        out = locked / "out"
        args = [str(scenario)] if command != "compare" else [str(tmp_path)]
        fails(
            capsys,
            [command, *args, "--out", str(out)],
            rf"--out {re.escape(str(out))}: cannot create anything in .*locked "
            r"\(Permission denied\)",
        )
        nothing_left(tmp_path, out)
    finally:
        locked.chmod(0o755)


def test_out_that_is_the_current_directory(small_case, capsys, monkeypatch):
    tmp_path, _, scenario = small_case
    here = tmp_path / "here"
    here.mkdir()
    monkeypatch.chdir(here)
    fails(capsys, ["run", str(scenario), "--out", "."], r"--out \.: is the current directory")
    fails(capsys, ["run", str(scenario), "--out", ".."], r"--out \.\.: is the current directory")
    assert here.is_dir()
    nothing_left(tmp_path)


def test_out_with_a_name_too_long(small_case, capsys):
    tmp_path, _, scenario = small_case
    out = tmp_path / ("x" * 300)
    fails(capsys, ["run", str(scenario), "--out", str(out)], r"--out .*: File name too long")
    nothing_left(tmp_path)


# -- a full disk, and other faults of the file system while writing ----------------------------


def failing_writer(exc):
    """A stand-in for the figure writer that writes part of a file, then fails with ``exc``."""

    def write(result, scenario, figures, claim=None):
        figures.mkdir(exist_ok=True)
        (figures / "age.png").write_bytes(b"\x89PNG half")
        raise exc(figures)

    return write


def os_error(code):
    return lambda figures: OSError(code, os.strerror(code), str(figures / "age.png"))


@pytest.mark.parametrize(
    ("exc", "pattern"),
    [
        (os_error(errno.ENOSPC), r"no space left on device while writing .*out/figures/age.png; "),
        (os_error(errno.EDQUOT), r"disk quota exceeded while writing .*out/figures/age.png; "),
        # SQLite (in a GeoPackage) says it its own way, without an errno
        (lambda d: RuntimeError("sqlite3_exec(COMMIT) failed: database or disk is full"), r"no "),
    ],
)
def test_a_full_disk_says_so_and_leaves_nothing(small_case, capsys, monkeypatch, exc, pattern):
    tmp_path, _, scenario = small_case
    monkeypatch.setattr("yieldscape.publish.write_figures", failing_writer(exc))
    out = tmp_path / "new" / "out"  # its parent is made for the run, and removed again
    err = fails(capsys, ["run", str(scenario), "--out", str(out)], pattern)
    assert "nothing was written: free space or choose another --out" in err
    assert "a bug" not in err
    nothing_left(tmp_path, out, tmp_path / "new")


def test_a_writer_failing_with_no_space_left_is_a_full_disk(small_case, capsys, monkeypatch):
    # GDAL reports some writes into a full disk as anything but that ("no such table")
    tmp_path, _, scenario = small_case
    boom = RuntimeError("sqlite3_exec(INSERT INTO gpkg_contents ...) failed: no such table")
    monkeypatch.setattr("yieldscape.publish.write_figures", failing_writer(lambda d: boom))
    monkeypatch.setattr(
        "yieldscape.io.outputs.shutil.disk_usage", lambda p: shutil._ntuple_diskusage(1, 1, 0)
    )
    out = tmp_path / "out"
    fails(capsys, ["run", str(scenario), "--out", str(out)], r"no space left on device \(sqlite")
    nothing_left(tmp_path, out)


@pytest.mark.parametrize(
    ("code", "words"), [(errno.EACCES, "Permission denied"), (errno.EROFS, "Read-only file system")]
)
def test_other_faults_while_writing_name_the_file(small_case, capsys, monkeypatch, code, words):
    tmp_path, _, scenario = small_case
    monkeypatch.setattr("yieldscape.publish.write_figures", failing_writer(os_error(code)))
    out = tmp_path / "out"
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        rf"--out .*out: cannot write {re.escape(str(out))}/figures/age.png \({words}\); "
        "nothing was written",
    )
    nothing_left(tmp_path, out)


def test_an_earlier_output_is_kept_whole_when_the_disk_fills(earlier, capsys, monkeypatch):
    tmp_path, scenario, out = earlier
    before = sorted(p.name for p in out.iterdir())
    monkeypatch.setattr("yieldscape.publish.write_figures", failing_writer(os_error(errno.ENOSPC)))
    fails(capsys, ["run", str(scenario), "--out", str(out)], r"no space left on device")
    assert sorted(p.name for p in out.iterdir()) == before
    nothing_left(tmp_path)


def test_a_bug_while_writing_is_still_a_bug_and_leaves_nothing(small_case, capsys, monkeypatch):
    tmp_path, _, scenario = small_case
    bug = failing_writer(lambda d: TypeError("unsupported operand"))
    monkeypatch.setattr("yieldscape.publish.write_figures", bug)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 1
    assert "unexpected error (a bug)" in capsys.readouterr().err
    nothing_left(tmp_path, out)


def in_the_helper_only(writer):
    """``writer`` where the figures' helper process draws (forked beside the GeoPackage
    writes, yieldscape.sharedwork); the real figure writer in this process."""
    from yieldscape import publish

    here, draw = os.getpid(), publish.write_figures

    def write(result, scenario, figures, claim=None):
        if os.getpid() != here:
            return writer(result, scenario, figures, claim)
        return draw(result, scenario, figures, claim)

    return write


def test_a_full_disk_in_the_figures_helper_process_says_so(small_case, capsys, monkeypatch):
    tmp_path, _, scenario = small_case
    helper = in_the_helper_only(failing_writer(os_error(errno.ENOSPC)))
    monkeypatch.setattr("yieldscape.publish.write_figures", helper)
    out = tmp_path / "out"
    err = fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"no space left on device while writing .*out/figures/age.png; nothing was written",
    )
    assert "a bug" not in err
    nothing_left(tmp_path, out)


def test_a_bug_in_the_figures_helper_process_is_a_bug_with_its_traceback(
    small_case, capsys, monkeypatch
):
    tmp_path, _, scenario = small_case
    helper = in_the_helper_only(failing_writer(lambda d: TypeError("unsupported operand")))
    monkeypatch.setattr("yieldscape.publish.write_figures", helper)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert "unexpected error (a bug)" in err
    assert "in the helper process drawing the figures" in err  # where it happened
    assert "raise exc(figures)" in err  # the helper's own traceback
    nothing_left(tmp_path, out)


def test_the_figures_helper_process_killed_says_so_and_leaves_nothing(
    small_case, capsys, monkeypatch
):
    tmp_path, _, scenario = small_case

    def killed(result, scenario, figures, claim=None):
        os.kill(os.getpid(), signal.SIGKILL)  # as the kernel's out-of-memory killer would

    monkeypatch.setattr("yieldscape.publish.write_figures", in_the_helper_only(killed))
    out = tmp_path / "out"
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"the helper process drawing the figures ended without a result \(killed by SIGKILL\)",
    )
    nothing_left(tmp_path, out)


def test_a_full_disk_in_the_stands_writer_says_so(small_case, capsys, monkeypatch):
    # the stands layer is written by a helper process forked while the run builds its tables
    tmp_path, _, scenario = small_case

    def full(stands, directory, *args):
        gpkg = directory / "projection.gpkg"
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(gpkg))

    monkeypatch.setattr("yieldscape.publish.write_stands_layer", full)
    out = tmp_path / "out"
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"no space left on device while writing .*out/projection.gpkg; nothing was written",
    )
    nothing_left(tmp_path, out)


def test_a_run_failing_while_the_stands_are_written_kills_the_writer(
    small_case, capsys, monkeypatch
):
    from yieldscape import pipeline, publish

    tmp_path, _, scenario = small_case
    started, late = tmp_path / "started", tmp_path / "late"
    real = publish.write_stands_layer

    def slow(stands, directory, *args):
        started.write_text(str(os.getpid()))
        time.sleep(1.5)
        late.write_text("written after the run had failed")
        return real(stands, directory, *args)

    def failing(*args):
        while not started.exists() or not started.read_text():
            time.sleep(0.01)  # the writer is at work
        raise KeyError("a bug in the indicators")

    monkeypatch.setattr(publish, "write_stands_layer", slow)
    monkeypatch.setattr(pipeline, "_indicators", failing)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 1
    assert "unexpected error (a bug)" in capsys.readouterr().err
    nothing_left(tmp_path, out)
    with pytest.raises(ProcessLookupError):  # killed and reaped
        os.kill(int(started.read_text()), 0)
    time.sleep(1.7)
    assert not late.exists()


@pytest.mark.parametrize("command", ["curves", "compare"])
def test_a_full_disk_in_curves_and_compare(earlier, capsys, monkeypatch, command):
    tmp_path, scenario, run = earlier  # the small case and a run of it to compare

    def full(path, *args):
        path.write_bytes(b"half")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    figure = {"curves": "curve_figure", "compare": "comparison_figure"}[command]
    monkeypatch.setattr(f"yieldscape.publish.{figure}", full)  # the writer draws them
    out = tmp_path / "cmp"
    args = [str(scenario)] if command == "curves" else [str(run)]
    png = "curves_pine.png" if command == "curves" else "comparison.png"
    fails(
        capsys,
        [command, *args, "--out", str(out)],
        rf"no space left on device while writing into .*cmp; {png} is left as it was: free space",
    )
    assert not [p for p in out.rglob("*") if p.name.startswith(".partial")]


# -- SIGTERM and SIGINT while writing ----------------------------------------------------------

# The real command in a process of its own, with the figure writer held up inside the staged
# write until the signal comes (it marks the moment with a file named after the process: the
# run's own, or its helper drawing the figures beside it), so the test does not race.
# Ctrl-C raises KeyboardInterrupt as in a terminal, also where the suite itself was started in
# the background, which starts it (and so this process) with SIGINT ignored.
HELD_WRITE = """
import os, signal, sys, time
signal.signal(signal.SIGINT, signal.default_int_handler)
import yieldscape.publish as publish
def held(result, scenario, figures, claim=None):
    figures.mkdir(exist_ok=True)
    (figures / f"writing.{os.getpid()}").write_text("")
    time.sleep(120)
publish.write_figures = held
from yieldscape.cli.main import main
sys.exit(main(sys.argv[1:]))
"""


def run_until_writing(tmp_path, scenario, out):
    proc = subprocess.Popen(
        [sys.executable, "-c", HELD_WRITE, "run", str(scenario), "--out", str(out), "-q"],
        stderr=subprocess.PIPE,
        text=True,
    )
    deadline = time.monotonic() + 60
    while not list(tmp_path.glob(f".{out.name}.*.partial/figures/writing.*")):
        if proc.poll() is not None or time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"the run did not reach its writing: {proc.communicate()[1]}")
        time.sleep(0.01)
    return proc


@pytest.mark.parametrize(
    ("sig", "code", "name"), [(signal.SIGTERM, 143, "SIGTERM"), (signal.SIGINT, 130, "SIGINT")]
)
def test_a_signal_while_writing_leaves_nothing(small_case, sig, code, name):
    tmp_path, _, scenario = small_case
    out = tmp_path / "out"
    proc = run_until_writing(tmp_path, scenario, out)
    marks = tmp_path.glob(f".{out.name}.*.partial/figures/writing.*")
    helpers = {int(p.suffix[1:]) for p in marks} - {proc.pid}
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert f"yieldscape: interrupted ({name}); no output was written" in err
    assert "Traceback" not in err
    nothing_left(tmp_path, out)
    for pid in helpers:  # the figures' helper process went with the run
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)


def test_sigterm_while_replacing_an_earlier_output_keeps_it(earlier):
    tmp_path, scenario, out = earlier
    before = {p.name: p.stat().st_mtime_ns for p in out.iterdir()}
    proc = run_until_writing(tmp_path, scenario, out)
    proc.send_signal(signal.SIGTERM)
    proc.communicate(timeout=60)
    assert proc.returncode == 143
    assert {p.name: p.stat().st_mtime_ns for p in out.iterdir()} == before
    nothing_left(tmp_path)


class _Signalled(Exception):
    pass


def test_a_signal_while_moving_into_place_waits_until_the_output_is_whole(earlier, monkeypatch):
    # SIGTERM (here with a handler of the test's) arrives between the two moves of the
    # commit: it is held until the new output is in place and the earlier one removed.
    from yieldscape.io import outputs

    tmp_path, _, out = earlier
    rename = Path.rename

    def rename_then_signal(self, target):
        done = rename(self, target)
        if str(target).endswith(".old"):
            signal.raise_signal(signal.SIGTERM)
        return done

    def on_term(signum, frame):
        raise _Signalled

    monkeypatch.setattr(Path, "rename", rename_then_signal)
    previous = signal.signal(signal.SIGTERM, on_term)
    try:
        with pytest.raises(_Signalled):
            with outputs.staged_output(out, MANAGED | {"new.txt"}) as tmp:
                (tmp / "run.json").write_text("{}")
                (tmp / "new.txt").write_text("new")
    finally:
        signal.signal(signal.SIGTERM, previous)
    assert sorted(p.name for p in out.iterdir()) == ["new.txt", "run.json"]
    nothing_left(tmp_path)


# -- a second run into the same folder -----------------------------------------------------------


def with_a_case(tmp_path, layer):
    raw = scenario_dict(layer, report=DRAWN)
    raw["sensitivity"] = [{"name": "late", "set": {"species.pine.min_harvest_age": 80}}]
    return write_scenario(tmp_path / "cases.toml", raw)


def test_a_second_run_replaces_what_the_first_wrote_whatever_its_cases(earlier, capsys):
    # The README's quick start writes the cases into results/<case>/; a run without them into
    # the same folder replaces it all, and the other way round.
    tmp_path, _, out = earlier
    cases = tmp_path / "cases.toml"
    record = json.loads((out / "run.json").read_text())
    assert record["outputs"] == sorted(p.name for p in out.iterdir())
    assert "late" in record["outputs"] and "run.log" in record["outputs"]
    assert main(["run", str(cases), "--out", str(out), "-q", "--set", "sensitivity=[]"]) == 0
    assert not (out / "late").exists()
    assert main(["run", str(cases), "--out", str(out), "-q"]) == 0
    assert (out / "late" / "run.json").is_file()
    nothing_left(tmp_path)


def test_output_written_before_runs_listed_theirs_is_replaced(earlier):
    _, scenario, out = earlier
    for rec_path in (out / "run.json", out / "late" / "run.json"):  # as an earlier version wrote
        record = json.loads(rec_path.read_text())
        del record["outputs"]
        rec_path.write_text(json.dumps(record))
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0
    assert not (out / "late").exists()


@pytest.mark.parametrize("legacy", [False, True])
@pytest.mark.parametrize(
    ("mine", "named"),
    [
        ("late/notes.txt", "late/notes.txt"),  # in a case's folder
        ("figures2/map.png", "figures2"),  # a folder of one's own
        ("late2/run.json", "late2"),  # a folder with a run.json that yieldscape did not write
    ],
)
def test_a_users_file_among_an_earlier_runs_is_never_deleted(earlier, capsys, legacy, mine, named):
    _, scenario, out = earlier
    if legacy:
        record = json.loads((out / "run.json").read_text())
        del record["outputs"]
        (out / "run.json").write_text(json.dumps(record))
    (out / mine).parent.mkdir(exist_ok=True)
    (out / mine).write_text("{}")
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        rf"holds files yieldscape did not write \({re.escape(named)}\)",
    )
    assert (out / mine).read_text() == "{}"


@pytest.mark.parametrize("text", ["{not json", '{"a": 1}', "[]"])
def test_an_earlier_output_whose_run_json_is_not_yieldscapes_is_refused(small_case, capsys, text):
    tmp_path, _, scenario = small_case
    out = tmp_path / "results"
    out.mkdir()
    (out / "run.json").write_text(text)
    (out / "wood_flow.csv").write_text("mine")
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"holds no run.json yieldscape wrote, so it is not an earlier yieldscape output",
    )
    assert (out / "wood_flow.csv").read_text() == "mine"


# -- a scenario that is not UTF-8, a NUL byte in a path ------------------------------------------


@pytest.mark.parametrize(
    ("encode", "pattern"),
    [
        # Latin-1: "é" is the single byte 0xe9, never valid UTF-8 on its own
        (
            lambda text: b"# r\xe9gion\n" + text.encode(),
            r"scenario.toml: not UTF-8 text: byte 0xe9 at position 3 \(line 1\); save it as UTF-8",
        ),
        (
            lambda text: text.encode("utf-16"),
            r"not UTF-8 text: byte 0xff at position 0 \(line 1\) \(the file is UTF-16\)",
        ),
        (
            lambda text: text.replace("[species", "# \xe9t\xe9\n[species", 1).encode("cp1252"),
            r"not UTF-8 text: byte 0xe9 at position \d+ \(line \d+\)",
        ),
    ],
)
def test_a_scenario_that_is_not_utf8(small_case, capsys, encode, pattern):
    tmp_path, _, scenario = small_case
    scenario.write_bytes(encode(scenario.read_text(encoding="utf-8")))
    out = tmp_path / "out"
    fails(capsys, ["run", str(scenario), "--out", str(out)], pattern)
    nothing_left(tmp_path, out)


def test_a_scenario_with_a_byte_order_mark_is_read(small_case, capsys):
    # Some Windows editors start UTF-8 files with a byte-order mark (EF BB BF).
    _, _, scenario = small_case
    scenario.write_bytes(b"\xef\xbb\xbf" + scenario.read_bytes())
    assert main(["check", str(scenario)]) == 0


def test_a_nul_byte_in_the_paths_of_the_command(small_case, capsys):
    tmp_path, _, scenario = small_case
    out = tmp_path / "out"
    fails(
        capsys,
        ["run", f"{scenario}\0x", "--out", str(out)],
        r"scenario.toml\\x00x': the scenario file's path holds a NUL byte",
    )
    fails(capsys, ["run", str(scenario), "--out", f"{out}\0x"], r"--out '.*out\\x00x': .*NUL byte")
    fails(capsys, ["compare", str(tmp_path), "--out", f"{out}\0x"], r"--out '.*NUL byte")
    nothing_left(tmp_path, out)


@pytest.mark.parametrize(
    ("edit", "set_", "pattern"),
    [
        (
            ("inventory", "path", "stands\0.gpkg"),
            None,
            r"scenario.toml: inventory.path = '.*stands\\x00.gpkg': holds a NUL byte",
        ),
        (
            None,
            'inventory.path="stands\\u0000.gpkg"',
            r"--set inventory.path=.*: inventory.path = 'stands\\x00.gpkg': holds a NUL byte",
        ),
        (
            None,
            "species.pine.table_csv=y\0.csv",
            r"--set species.pine.table_csv=y\\x00.csv: .* holds a NUL byte",
        ),
        (
            ("inventory", "from_raster", {"site_index": "si\0.tif"}),
            None,
            r"inventory.from_raster.site_index = 'si\\x00.tif': holds a NUL byte",
        ),
    ],
)
def test_a_nul_byte_in_a_path_of_the_scenario(small_case, capsys, edit, set_, pattern):
    tmp_path, layer, scenario = small_case
    if edit is not None:
        raw = scenario_dict(layer, report=DRAWN)
        section, key, value = edit
        raw[section][key] = value
        write_scenario(scenario, raw)
        scenario.write_text(scenario.read_text().replace("\0", "\\u0000"))  # a TOML escape
    out = tmp_path / "out"
    extra = ["--set", set_] if set_ else []
    fails(capsys, ["run", str(scenario), "--out", str(out), *extra], pattern)
    nothing_left(tmp_path, out)


# -- links, names, folders that come and go, runs to compare that are not runs ------------------


def test_an_out_that_is_a_link_to_a_folder_writes_into_the_folder(small_case, capsys):
    tmp_path, _, scenario = small_case
    (tmp_path / "disk").mkdir()
    (tmp_path / "results").symlink_to(tmp_path / "disk")
    for _ in range(2):  # the second run replaces the first through the link
        assert main(["run", str(scenario), "--out", str(tmp_path / "results"), "-q"]) == 0
    assert (tmp_path / "results").is_symlink()
    assert (tmp_path / "disk" / "run.json").is_file()
    nothing_left(tmp_path)


def test_links_that_lead_nowhere(small_case, capsys):
    tmp_path, _, scenario = small_case
    (tmp_path / "a").symlink_to(tmp_path / "b")
    (tmp_path / "b").symlink_to(tmp_path / "a")
    fails(capsys, ["run", str(scenario), "--out", str(tmp_path / "a")], r"--out .*a: Too many")
    fails(
        capsys,
        ["run", str(scenario), "--out", str(tmp_path / "a" / "out")],
        r"--out .*a/out: .*a is a symbolic link that leads nowhere",
    )
    nothing_left(tmp_path)


def test_an_out_that_is_the_scenarios_own_folder(small_case, capsys):
    tmp_path, layer, scenario = small_case
    fails(
        capsys,
        ["run", str(scenario), "--out", str(tmp_path)],
        r"not empty and holds no run.json yieldscape wrote",
    )
    assert layer.is_file() and scenario.is_file()
    nothing_left(tmp_path)


def non_utf8_name(parent, name):
    """A path whose name holds the Latin-1 byte 0xe9, as Python keeps it (a lone surrogate)."""
    path = os.fsdecode(os.fsencode(parent) + b"/" + name.encode("latin-1"))
    try:
        os.mkdir(path)
    except OSError:
        pytest.skip("this file system takes UTF-8 names only")
    os.rmdir(path)
    return Path(path)


def test_names_that_are_not_utf8(small_case, capsys):
    tmp_path, layer, scenario = small_case
    out = non_utf8_name(tmp_path, "r\xe9sultats")
    err = fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"--out '.*r\\udce9sultats': the path is not UTF-8 \(byte 0xe9\)",
    )
    assert "read and check inventory" not in err
    layer2 = non_utf8_name(tmp_path, "st\xe9")
    fails(
        capsys,
        ["check", str(scenario), "--set", f"inventory.path={layer2}"],
        r"--set inventory.path=.*: inventory.path = '.*st\\udce9': is not UTF-8 text",
    )
    folder = non_utf8_name(tmp_path, "r\xe9gion")
    folder.mkdir()
    shutil.copy(layer, folder / "stands.gpkg")
    write_scenario(folder / "scenario.toml", scenario_dict(Path("stands.gpkg"), report=DRAWN))
    fails(
        capsys,
        ["check", str(folder / "scenario.toml")],
        r"r\\udce9gion/stands.gpkg': the stand layer's path is not UTF-8",
    )
    nothing_left(tmp_path, out)


def test_the_staged_folder_disappearing_while_writing(small_case, capsys, monkeypatch):
    tmp_path, _, scenario = small_case

    here = os.getpid()

    def gone(result, scenario, figures, claim=None):
        if os.getpid() != here:  # the figures' helper process: the folder goes once GDAL is done
            return {}
        shutil.rmtree(figures.parent)  # the staged folder, removed by someone else
        (figures.parent / "age.png").write_bytes(b"")

    monkeypatch.setattr("yieldscape.publish.write_figures", gone)
    out = tmp_path / "out"
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"\.out\.\w+\.partial \(where the run writes before moving its output into place\) "
        "was removed while the run wrote into it; nothing was written",
    )
    nothing_left(tmp_path, out)


def test_the_parent_of_out_disappearing_during_the_run(small_case, capsys, monkeypatch):
    # made at the start with the staged folder in it (the stands layer goes there while the
    # run projects), removed with it by someone else: an error that names the file
    from yieldscape import pipeline

    tmp_path, _, scenario = small_case
    project = pipeline._project

    def remove_then_project(*args):
        shutil.rmtree(tmp_path / "runs")
        return project(*args)

    monkeypatch.setattr(pipeline, "_project", remove_then_project)
    out = tmp_path / "runs" / "out"
    fails(
        capsys,
        ["run", str(scenario), "--out", str(out)],
        r"\.out\.\w+\.partial \(where the run writes before moving its output into place\) "
        "was removed while the run wrote into it; nothing was written",
    )
    nothing_left(tmp_path, out, tmp_path / "runs")


def test_a_file_put_into_the_earlier_output_while_writing_is_kept(earlier, capsys, monkeypatch):
    from yieldscape import publish

    tmp_path, scenario, out = earlier
    figures = publish.write_figures

    def and_a_note(result, scenario, directory, claim=None):
        (out / "notes.txt").write_text("mine")  # the user, meanwhile
        return figures(result, scenario, directory, claim)

    monkeypatch.setattr(publish, "write_figures", and_a_note)
    fails(capsys, ["run", str(scenario), "--out", str(out)], r"did not write \(notes.txt\)")
    assert (out / "notes.txt").read_text() == "mine"
    nothing_left(tmp_path)


def test_curves_out_where_its_figures_folder_is_a_file(small_case, capsys):
    tmp_path, _, scenario = small_case
    out = tmp_path / "rep"
    out.mkdir()
    (out / "figures").write_text("mine")
    fails(
        capsys,
        ["curves", str(scenario), "--out", str(out)],
        r"cannot write .*rep/figures \(File exists\); curves_pine.png is left as it was",
    )
    assert (out / "figures").read_text() == "mine"
    assert not [p for p in out.iterdir() if p.name.startswith(".partial")]


@pytest.fixture
def a_run(earlier):
    return earlier[2]


def test_compare_refuses_to_write_into_a_run(a_run, capsys):
    before = (a_run / "run.json").read_bytes()
    fails(
        capsys,
        ["compare", str(a_run), "--out", str(a_run)],
        r"holds a yieldscape run \(run.json\), whose own comparison.csv the comparison would",
    )
    assert (a_run / "run.json").read_bytes() == before
    assert not (a_run / "comparison.png").exists()


def _set(key, value):
    def edit(record):
        *path, last = key.split(".")
        table = record
        for part in path:
            table = table[part]
        table[last] = value
        return record

    return edit


@pytest.mark.parametrize(
    ("edit", "pattern"),
    [
        (lambda rec: [rec], r"results/run.json: not a run.json that yieldscape wrote"),
        (lambda rec: {"a": 1}, r"results/run.json: not a run.json that yieldscape wrote"),
        (_set("flow.level_m3_per_year", "89"), r"run.json: flow.level_m3_per_year is '89'"),
        (_set("scenario", None), r"run.json: scenario.scenario.name is missing"),
        (_set("verdict", []), r"run.json: verdict is \[\]; the file is not as a yieldscape run"),
        (_set("flow.initial_growing_stock_m3", True), r"flow.initial_growing_stock_m3 is True"),
    ],
)
def test_compare_a_run_whose_run_json_was_changed(a_run, capsys, edit, pattern):
    record = json.loads((a_run / "run.json").read_text())
    (a_run / "run.json").write_text(json.dumps(edit(record)))
    out = a_run.parent / "cmp"
    fails(capsys, ["compare", str(a_run), "--out", str(out)], pattern)
    assert not out.exists()


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ("period,harvest_m3\n1,5\n", r"wood_flow.csv: column 'start_year' is missing"),
        (None, r"wood_flow.csv: holds no periods"),
        ("x\n1\n", r"wood_flow.csv: column 'start_year' is missing"),
        (b"\xff\xfe\x00", r"results: cannot read its outputs \('utf-8' codec"),
    ],
)
def test_compare_a_run_whose_wood_flow_was_changed(a_run, capsys, text, pattern):
    csv = a_run / "wood_flow.csv"
    if text is None:
        csv.write_text(csv.read_text().splitlines()[0] + "\n")  # the header alone
    elif isinstance(text, bytes):
        csv.write_bytes(text)
    else:
        csv.write_text(text)
    out = a_run.parent / "cmp"
    fails(capsys, ["compare", str(a_run), "--out", str(out)], pattern)
    assert not out.exists()


def test_compare_what_is_not_a_run(small_case, capsys):
    tmp_path, layer, _ = small_case
    for what in (layer, tmp_path / "nowhere", tmp_path):
        fails(
            capsys,
            ["compare", str(what), "--out", str(tmp_path / "cmp")],
            rf"{re.escape(str(what))}: not a yieldscape output directory",
        )
    nothing_left(tmp_path, tmp_path / "cmp")


def test_bare_land_with_a_case_runs_and_compares(tmp_path, capsys):
    # Every stand aged 0 on a curve through the origin: no growing stock at the start, so the
    # ending-to-initial ratio has no value (as indicators.csv has it), instead of a failure.
    layer = write_layer(tmp_path / "bare.gpkg", squares(6), stand_attrs(6, ages=0))
    raw = scenario_dict(layer, report=DRAWN)
    raw["sensitivity"] = [{"name": "late", "set": {"species.pine.min_harvest_age": 80}}]
    scenario = write_scenario(tmp_path / "bare.toml", raw)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0
    assert main(["compare", str(out), str(out / "late"), "--out", str(tmp_path / "c"), "-q"]) == 0
    table = pd.read_csv(tmp_path / "c" / "comparison.csv")
    assert table["ending_stock_ratio"].isna().all()


def test_the_cache_keeps_no_part_of_an_entry_after_a_fault(tmp_path, monkeypatch):
    from yieldscape.io import cache

    monkeypatch.setenv("YIELDSCAPE_CACHE_DIR", str(tmp_path / "cache"))
    source = tmp_path / "in.bin"
    source.write_bytes(b"stands")

    def full(path, **arrays):
        Path(path).write_bytes(b"PK half")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(cache.np, "savez", full)
    arrays, hit = cache.cached_arrays("graph", source, "", lambda: {"a": np.arange(3)})
    assert not hit and arrays["a"].tolist() == [0, 1, 2]
    assert list((tmp_path / "cache").iterdir()) == []


TABLE = "age_years,volume_m3_ha\n0,0\n20,40\n40,150\n60,260\n80,320\n100,350\n"


def table_scenario(tmp_path, layer, table_csv):
    raw = scenario_dict(layer, report=DRAWN)
    raw["species"]["pine"] = {
        "curve": "table",
        "table_csv": str(table_csv),
        "min_harvest_age": 60,
        "site_index_min_m": 10.0,
        "site_index_max_m": 30.0,
    }
    return write_scenario(tmp_path / "table.toml", raw)


@pytest.mark.parametrize(
    ("content", "pattern"),
    [
        (None, r"yield: cannot read the yield table \(Is a directory\)"),
        (
            TABLE.replace("60,260", "60,260 # \xe9").encode("latin-1"),
            r"yield.csv: not UTF-8 text: byte 0xe9 at position \d+ \(line 5\); save it as UTF-8",
        ),
    ],
)
def test_a_yield_table_that_cannot_be_read(small_case, capsys, content, pattern):
    tmp_path, layer, _ = small_case
    if content is None:
        (tmp_path / "yield").mkdir()
        table_csv = tmp_path / "yield"
    else:
        table_csv = tmp_path / "yield.csv"
        table_csv.write_bytes(content)
    scenario = table_scenario(tmp_path, layer, table_csv)
    fails(capsys, ["run", str(scenario), "--out", str(tmp_path / "out")], pattern)
    nothing_left(tmp_path, tmp_path / "out")


def test_a_yield_table_saved_with_a_byte_order_mark_is_read(small_case, capsys):
    # spreadsheets save "CSV UTF-8" with EF BB BF first, which is not part of the first column
    tmp_path, layer, _ = small_case
    (tmp_path / "yield.csv").write_bytes(b"\xef\xbb\xbf" + TABLE.encode())
    assert main(["check", str(table_scenario(tmp_path, layer, tmp_path / "yield.csv"))]) == 0


def test_fit_on_a_folder(tmp_path, capsys):
    fails(
        capsys, ["fit", str(tmp_path)], rf"{re.escape(str(tmp_path))}: cannot read the points file"
    )


def test_a_file_system_that_refuses_modes(small_case, monkeypatch):
    # FAT (a USB stick) mounted with a mask refuses chmod with EPERM; the output is written
    tmp_path, _, scenario = small_case

    def refuse(self, mode):
        raise PermissionError(errno.EPERM, os.strerror(errno.EPERM), str(self))

    monkeypatch.setattr(Path, "chmod", refuse)
    assert main(["run", str(scenario), "--out", str(tmp_path / "out"), "-q"]) == 0
    assert (tmp_path / "out" / "run.json").is_file()
    nothing_left(tmp_path)
