"""Output directories that appear whole or not at all.

:func:`staged_output` yields a fresh temporary directory next to the target; when the block
ends without error the target is replaced by it in two renames, otherwise it is removed and the
target is left as it was. A target that exists is replaced only when it holds nothing but
what an earlier yieldscape run wrote there (its ``run.json`` lists it); anything else in it (a
user's notes, a project file) makes the run stop before any work, so nothing of the user's is
ever deleted.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import signal
import tempfile
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pandas as pd

from yieldscape.errors import OutputError

MARKER = "run.json"


def check_output_dir(out: Path, managed: frozenset[str]) -> None:
    """Refuse early an output path yieldscape must not replace or cannot write.

    A non-empty directory is replaced only if it holds nothing but what an earlier run wrote
    (see :func:`_not_written_by_a_run`; ``managed`` names the entries yieldscape writes). The
    staged copy is made beside ``out``, so its parent (or the nearest ancestor that exists)
    must take new entries.
    """
    target = _target(out)
    if _exists(target, out):
        if not target.is_dir():
            raise OutputError(f"--out {out}: exists and is not a directory")
        if _holds_cwd(target):
            raise OutputError(
                f"--out {out}: is the current directory or holds it, and a run replaces its "
                "--out whole; choose another directory, such as a new sub-directory"
            )
        foreign = _not_written_by_a_run(target, managed, out)
        if foreign is None:
            raise OutputError(
                f"--out {out}: the directory is not empty and holds no {MARKER} yieldscape wrote, "
                "so it is not an earlier yieldscape output; choose a new or empty directory"
            )
        if foreign:
            raise OutputError(
                f"--out {out}: holds files yieldscape did not write ({', '.join(foreign[:5])}"
                f"{' ...' if len(foreign) > 5 else ''}); replacing the directory would "
                "delete them. Move them out or choose another directory"
            )
    check_writable(target.parent, out)


def _not_written_by_a_run(directory: Path, managed: frozenset[str], out: Path) -> list[str] | None:
    """The entries of ``directory`` that no yieldscape run wrote, or None if it is neither empty
    nor an earlier run's output (no readable ``run.json`` of yieldscape).

    A run's ``run.json`` lists what it wrote (``outputs``); an entry in ``managed`` is one a
    yieldscape command writes there (``curves.csv`` beside a run). Output written before runs
    listed theirs is known by its sub-folders that hold a run's own ``run.json`` (the cases).
    A sensitivity case's folder is looked into the same way.
    """
    entries = sorted(p.name for p in _listing(directory, out))
    if not entries:
        return []
    record = _run_json(directory)
    if record is None:
        return None
    listed = record.get("outputs")
    foreign = []
    for name in entries:
        path = directory / name
        is_run = path.is_dir() and not path.is_symlink() and (path / MARKER).is_file()
        if name in managed or (name in listed if isinstance(listed, list) else is_run):
            inner = _not_written_by_a_run(path, managed, out) if is_run else []
            foreign += [name] if inner is None else [f"{name}/{x}" for x in inner]
        else:
            foreign.append(name)
    return foreign


def _run_json(directory: Path) -> dict | None:
    """The ``run.json`` yieldscape wrote in ``directory``, or None (absent, unreadable, other)."""
    try:
        record = json.loads((directory / MARKER).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return record if isinstance(record, dict) and "yieldscape_version" in record else None


def check_files_dir(out: Path) -> None:
    """Refuse early an output directory that files are written into one by one (``curves``,
    ``compare``): it must be a directory, or be possible to make, and take new entries."""
    target = _target(out)
    if _exists(target, out) and not target.is_dir():
        raise OutputError(f"--out {out}: exists and is not a directory")
    check_writable(target, out)


def check_writable(directory: Path, out: Path) -> None:
    """Refuse ``directory`` (where ``--out out`` puts new entries) if no entry can be made in
    it: it, or the nearest ancestor that exists when it is still to be made, must be a
    directory in which a temporary entry can be made and removed. Trying is the only honest
    test: permissions, access lists, read-only mounts and root all answer it."""
    probe = directory
    while not _exists(probe, out) and probe.parent != probe:
        if probe.is_symlink():  # a link to nothing, or a loop: no folder can be made through it
            raise OutputError(
                f"--out {out}: {probe} is a symbolic link that leads nowhere; choose another --out"
            )
        probe = probe.parent
    if not probe.is_dir():
        raise OutputError(
            f"--out {out}: {probe} is {'a file' if probe.exists() else 'missing'}, not a "
            "directory; choose another --out"
        )
    try:
        with signals_held():
            os.rmdir(tempfile.mkdtemp(prefix=".yieldscape-", suffix=".probe", dir=probe))
    except OSError as exc:
        raise OutputError(
            f"--out {out}: cannot create anything in {probe} ({exc.strerror}); "
            "choose another --out or change the directory's permissions"
        ) from None


def _target(out: Path) -> Path:
    """The absolute, normalised path written to; a symbolic link is followed, so a run through
    a linked directory replaces what the link points to, not the link."""
    text = str(out)
    if "\0" in text:
        raise OutputError(f"--out {text!r}: the path holds a NUL byte")
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as exc:  # bytes of another encoding, as Python keeps them
        raise OutputError(
            f"--out {text!r}: the path is not UTF-8 (byte 0x{ord(text[exc.start]) & 0xFF:02x}), "
            "and GDAL writes to UTF-8 paths only; choose another name"
        ) from None
    try:
        if Path(out).is_symlink():
            try:
                return Path(os.path.realpath(out, strict=True))
            except FileNotFoundError:
                return Path(os.path.realpath(out))  # a link to a folder yet to be made
        return Path(os.path.abspath(out))
    except OSError as exc:  # a loop of links; the current directory removed
        raise OutputError(f"--out {out}: {exc.strerror}") from None


def _holds_cwd(target: Path) -> bool:
    try:
        cwd = Path.cwd()
    except OSError:
        return False
    real = Path(os.path.realpath(target))
    return real == cwd or real in cwd.parents


def _exists(path: Path, out: Path) -> bool:
    try:
        return path.exists()
    except OSError as exc:  # a name too long, a permission on the way
        raise OutputError(f"--out {out}: {path}: {exc.strerror}") from None


def _listing(directory: Path, out: Path) -> list[Path]:
    try:
        return list(directory.iterdir())
    except OSError as exc:
        raise OutputError(f"--out {out}: cannot list {directory} ({exc.strerror})") from None


@contextmanager
def staged_output(out: Path, managed: frozenset[str]) -> Iterator[Path]:
    """Write into a temporary sibling of ``out``; move it into place only on success.

    A fault of the file system while writing (a full disk or quota, a permission, a read-only
    mount) becomes an :class:`OutputError` that says so; on any failure nothing is left behind:
    no staged directory and no parent folder made for it.
    """
    check_output_dir(out, managed)
    target = _target(out)
    made = [p for p in reversed(target.parents) if not p.exists()]  # outermost first
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        # a short prefix keeps the staged name within the file system's limit for a long name
        tmp = Path(
            tempfile.mkdtemp(prefix=f".{target.name[:64]}.", suffix=".partial", dir=target.parent)
        )
    except OSError as exc:
        _remove_made(made)
        fault = write_fault(exc, out)
        if fault is None:
            raise
        raise fault from exc
    placed = False
    try:
        umask = os.umask(0)
        os.umask(umask)
        try:
            tmp.chmod(0o777 & ~umask)  # mkdtemp makes it private; results are for sharing
        except OSError:
            pass  # a file system without modes (FAT on a USB stick refuses them): as it is
        yield tmp
        check_output_dir(out, managed)  # again: something may have been put there meanwhile
        with signals_held():  # an interrupt now waits until the output is whole in place
            _move_into_place(tmp, target)
            placed = True
    except KeyboardInterrupt as exc:
        if placed:
            exc.add_note(f"the output was complete and is in {out}")
        else:
            _clean_up(tmp, made)
        raise
    except BaseException as exc:
        fault = write_fault(exc, out, tmp) if isinstance(exc, Exception) and not placed else None
        _clean_up(tmp, made)
        if fault is not None:
            raise fault from exc
        raise


def _move_into_place(tmp: Path, target: Path) -> None:
    old = tmp.with_suffix(".old") if target.exists() else None
    if old is not None:
        target.rename(old)
    try:
        tmp.rename(target)
    except OSError:
        if old is not None:
            old.rename(target)  # the earlier output back in place
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _clean_up(tmp: Path, made: list[Path]) -> None:
    with signals_held(deliver=False):  # a second interrupt must not stop the clean-up
        shutil.rmtree(tmp, ignore_errors=True)
        _remove_made(made)


@contextmanager
def signals_held(deliver: bool = True) -> Iterator[None]:
    """Hold SIGINT and SIGTERM while file operations run that must not stop half way (a move
    into place, a clean-up); with ``deliver`` one that came meanwhile is raised again when the
    block has ended without error. Python runs signal handlers in the main thread only, so
    elsewhere this holds nothing."""
    kinds = (signal.SIGINT, signal.SIGTERM)
    saved = {kind: signal.getsignal(kind) for kind in kinds}
    if threading.current_thread() is not threading.main_thread() or None in saved.values():
        yield  # not ours to change
        return
    came: list[int] = []
    for kind in kinds:
        signal.signal(kind, lambda signum, frame: came.append(signum))
    try:
        yield
    finally:
        for kind, handler in saved.items():
            signal.signal(kind, handler)
    if came and deliver:
        signal.raise_signal(came[0])


NO_SPACE = {errno.ENOSPC: "no space left on device", errno.EDQUOT: "disk quota exceeded"}
FULL_WORDS = ("no space left on device", "disk is full", "disk quota exceeded")
LOW_SPACE_BYTES = 1 << 20  # a writer that fails with less free than this beside it ran out


def write_fault(
    exc: Exception, out: Path, staged: Path | None = None, left: str = "nothing was written"
) -> OutputError | None:
    """The input error for a fault of the file system while writing under ``--out out``
    (into ``staged``, which stands in for it), or None for anything else (a bug). Any
    error once ``staged`` is gone (removed by someone else) is that.

    A full disk or quota is named as such even when a library reports it in its own words
    (SQLite's "database or disk is full") or as a failure it cannot explain, which is what
    GDAL makes of some: its error, with next to no space left, is taken for a full disk.
    ``left`` says what became of the outputs."""
    if isinstance(exc, OutputError):
        return None  # already says what is wrong
    if staged is not None and not staged.exists():  # whatever failed, this is why
        return OutputError(
            f"--out {out}: {staged} (where the run writes before moving its output into "
            f"place) was removed while the run wrote into it; {left}"
        )
    filename = getattr(exc, "filename", None)
    where = _shown(filename, out, staged) if filename else f"into {out}"
    reason = NO_SPACE.get(getattr(exc, "errno", None) or 0)
    if reason is None and any(w in str(exc).lower() for w in FULL_WORDS):
        reason = "no space left on device"
    if reason is None and isinstance(exc, OSError | RuntimeError):
        try:
            if shutil.disk_usage(staged or _nearest(out)).free < LOW_SPACE_BYTES:
                reason = f"no space left on device ({exc})"
        except OSError:
            pass
    if reason is not None:
        return OutputError(
            f"--out {out}: {reason} while writing {where}; {left}: free space or choose "
            "another --out"
        )
    if isinstance(exc, OSError) and exc.errno is not None:
        return OutputError(f"--out {out}: cannot write {where} ({exc.strerror}); {left}")
    return None


def _shown(filename: object, out: Path, staged: Path | None) -> str:
    """A path in the staged directory as the user knows it: under ``--out``."""
    path = Path(os.fsdecode(filename))  # type: ignore[arg-type]
    if staged is not None and path.is_relative_to(staged):
        path = Path(out) / path.relative_to(staged)
    return str(path)


def _nearest(path: Path) -> Path:
    path = Path(os.path.abspath(path))
    while not path.exists() and path.parent != path:
        path = path.parent
    return path


def _remove_made(made: list[Path]) -> None:
    for folder in reversed(made):
        try:
            folder.rmdir()
        except OSError:
            break


def write_json(path: Path, data: Any) -> None:
    path.write_text(json.dumps(data, indent=2, default=str) + "\n", encoding="utf-8")


def sha256_file(path: Path) -> str:
    """SHA-256 of a file's bytes; of a directory (a partitioned dataset), of each file's
    path inside it and bytes, in path order."""
    digest = hashlib.sha256()
    path = Path(path)
    files = sorted(p for p in path.rglob("*") if p.is_file()) if path.is_dir() else [path]
    for file in files:
        if file != path:
            digest.update(file.relative_to(path).as_posix().encode() + b"\0")
        with file.open("rb") as fh:
            for block in iter(lambda fh=fh: fh.read(1 << 20), b""):
                digest.update(block)
    return digest.hexdigest()


def replace_file(path: Path, write: Callable[[Path], None], out: Path) -> None:
    """Write one file through ``write(tmp_path)`` and move it over ``path`` (under
    ``--out out``) only when done; a fault of the file system is an :class:`OutputError`."""
    tmp = path.with_name(f".partial.{path.name}")  # same suffix: writers pick formats by it
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write(tmp)
        os.replace(tmp, path)
    except Exception as exc:
        fault = write_fault(exc, out, left=f"{path.name} is left as it was")
        if fault is not None:
            raise fault from exc
        raise
    finally:
        try:
            tmp.unlink(missing_ok=True)
        except OSError:
            pass  # never made (its folder could not be)


# What a comparison reads of a run (reporting/compare.py), checked when it is read, so that a
# run.json changed by hand or written by something else is an error that names the key.
RUN_NEEDS: dict[str, type | tuple[type, ...]] = {
    "scenario.scenario.name": str,
    "flow.policy": str,
    "flow.level_m3_per_year": (int, float),
    "flow.initial_growing_stock_m3": (int, float),
    "flow.ending_growing_stock_m3": (int, float),
    "inventory": dict,
    "flow.long_term_sustained_yield_m3_per_year": (dict, type(None)),
    "lp": (dict, type(None)),
    "verdict": (dict, type(None)),
}
OPTIONAL = {"flow.long_term_sustained_yield_m3_per_year", "lp", "verdict"}
WOOD_FLOW_NEEDS = ("start_year", "end_year", "harvest_m3", "harvest_m3_per_year")
REGION = "region"  # wood_flow's ``unit`` of the region's rows (the units' rows follow them)
_ABSENT = object()


def read_run(directory: Path) -> tuple[dict, pd.DataFrame]:
    """run.json and wood_flow.csv of a yieldscape output directory, with what a comparison of
    runs reads of them checked."""
    rec_path, wf_path = directory / MARKER, directory / "wood_flow.csv"
    if not rec_path.is_file() or not wf_path.is_file():
        raise OutputError(
            f"{directory}: not a yieldscape output directory (needs {MARKER} and wood_flow.csv)"
        )
    try:
        record, wf = json.loads(rec_path.read_text(encoding="utf-8")), pd.read_csv(wf_path)
    except (ValueError, OSError) as exc:
        raise OutputError(f"{directory}: cannot read its outputs ({exc})") from None
    if not isinstance(record, dict) or "yieldscape_version" not in record:
        raise OutputError(f"{rec_path}: not a run.json that yieldscape wrote")
    for key, kind in RUN_NEEDS.items():
        value: object = record
        for part in key.split("."):
            value = value.get(part, _ABSENT) if isinstance(value, dict) else _ABSENT
        if value is _ABSENT and key in OPTIONAL:
            continue
        if value is _ABSENT or isinstance(value, bool) or not isinstance(value, kind):
            found = "missing" if value is _ABSENT else f"{value!r}"
            raise OutputError(
                f"{rec_path}: {key} is {found}; the file is not as a yieldscape run wrote it"
            )
    if "unit" in wf:  # a run with management units: its regional rows
        wf = wf[wf["unit"] == REGION].reset_index(drop=True)
    if wf.empty:
        raise OutputError(f"{wf_path}: holds no periods")
    for col in WOOD_FLOW_NEEDS:
        if col not in wf or not pd.api.types.is_numeric_dtype(wf[col]):
            raise OutputError(
                f"{wf_path}: column {col!r} is {'missing' if col not in wf else 'not numeric'}; "
                "the file is not as a yieldscape run wrote it"
            )
    return record, wf
