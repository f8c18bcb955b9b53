"""Output directories that appear whole or not at all.

:func:`staged_output` yields a fresh temporary directory next to the target; when the block
ends without error the target is replaced by it in two renames, otherwise it is removed and the
target is left as it was. A target that exists and does not look like an earlier foresight
output (no ``run.json``) is never replaced.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from foresight.errors import OutputError

MARKER = "run.json"


def check_output_dir(out: Path) -> None:
    """Refuse early an output path foresight must not replace."""
    if out.exists():
        if not out.is_dir():
            raise OutputError(f"--out {out}: exists and is not a directory")
        if any(out.iterdir()) and not (out / MARKER).is_file():
            raise OutputError(
                f"--out {out}: the directory is not empty and holds no {MARKER}, so it is not "
                "an earlier foresight output; choose a new or empty directory"
            )


@contextmanager
def staged_output(out: Path) -> Iterator[Path]:
    """Write into a temporary sibling of ``out``; move it into place only on success."""
    out = Path(out)
    check_output_dir(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
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
