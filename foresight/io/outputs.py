"""Output directories that appear whole or not at all.

:func:`staged_output` yields a fresh temporary directory next to the target; when the block
ends without error the target is replaced by it in two renames, otherwise it is removed and the
target is left as it was. A target that exists is replaced only when it holds nothing but
what a foresight run writes (``run.json`` among it); anything else in it (a user's notes, a
project file) makes the run stop before any work, so nothing of the user's is ever deleted.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pandas as pd

from foresight.errors import OutputError

MARKER = "run.json"


def check_output_dir(out: Path, managed: frozenset[str]) -> None:
    """Refuse early an output path foresight must not replace.

    ``managed`` names the entries a run writes; a non-empty directory is replaced only if it
    holds ``run.json`` and nothing outside ``managed``.
    """
    if out.exists():
        if not out.is_dir():
            raise OutputError(f"--out {out}: exists and is not a directory")
        entries = sorted(p.name for p in out.iterdir())
        if not entries:
            return
        if MARKER not in entries:
            raise OutputError(
                f"--out {out}: the directory is not empty and holds no {MARKER}, so it is not "
                "an earlier foresight output; choose a new or empty directory"
            )
        foreign = [name for name in entries if name not in managed]
        if foreign:
            raise OutputError(
                f"--out {out}: holds files foresight did not write ({', '.join(foreign[:5])}"
                f"{' ...' if len(foreign) > 5 else ''}); replacing the directory would delete "
                "them. Move them out or choose another directory"
            )


@contextmanager
def staged_output(out: Path, managed: frozenset[str]) -> Iterator[Path]:
    """Write into a temporary sibling of ``out``; move it into place only on success."""
    out = Path(out)
    check_output_dir(out, managed)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
    umask = os.umask(0)
    os.umask(umask)
    tmp.chmod(0o777 & ~umask)  # mkdtemp makes it private; results are for sharing
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if out.exists():
        old = out.with_name(f".{out.name}.{tmp.name.split('.')[-2]}.old")
        out.rename(old)
    tmp.rename(out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def write_json(path: Path, data: Any) -> None:
    path.write_text(json.dumps(data, indent=2, default=str) + "\n", encoding="utf-8")


def sha256_file(path: Path) -> str:
    digest = hashlib.sha256()
    with Path(path).open("rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def replace_file(path: Path, write: Callable[[Path], None]) -> None:
    """Write one file through ``write(tmp_path)`` and move it over ``path`` only when done."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".partial.{path.name}")  # same suffix: writers pick formats by it
    try:
        write(tmp)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def read_run(directory: Path) -> tuple[dict, pd.DataFrame]:
    """run.json and wood_flow.csv of a foresight output directory."""
    rec_path, wf_path = directory / MARKER, directory / "wood_flow.csv"
    if not rec_path.is_file() or not wf_path.is_file():
        raise OutputError(
            f"{directory}: not a foresight output directory (needs {MARKER} and wood_flow.csv)"
        )
    try:
        return json.loads(rec_path.read_text(encoding="utf-8")), pd.read_csv(wf_path)
    except (ValueError, OSError) as exc:
        raise OutputError(f"{directory}: cannot read its outputs ({exc})") from None
