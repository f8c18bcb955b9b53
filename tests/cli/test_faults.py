"""Faults around a run: where the output goes, a full disk, signals, a second run into the same
folder, paths that cannot be used. Each case asserts the exit code, a message naming the path
or key, no traceback and nothing written (no output, no staged sibling left behind)."""

import os
import re
import uuid

import pytest

from foresight.cli.main import main

STAGED = (".partial", ".old", ".probe")


def fails(capsys, args, pattern, code=2):
    """Run the command; it exits ``code`` with one error line matching ``pattern``."""
    assert main(args) == code
    err = capsys.readouterr().err
    assert "Traceback" not in err, err
    errors = [line for line in err.splitlines() if line.startswith("foresight: error:")]
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
