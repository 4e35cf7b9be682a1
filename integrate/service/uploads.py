"""Uploads: a source's new export, or a mapping file checked like ``integrate check`` first.

Nothing is ever written outside the workspace: a target is refused when its name has ``..``, is
absolute, or resolves (symbolic links followed) to a place outside the workspace folder. The body
is streamed to a temporary file beside the target (bounded by a size limit), flushed to disk,
and renamed over the target only when complete, so a reader sees the old file or the new one.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from collections.abc import AsyncIterator
from pathlib import Path, PurePosixPath

from ..errors import InputError
from ..mapping.findings import Finding
from ..workspace import CANONICAL_FILE, MAPPINGS_DIR, load_workspace

MAPPING_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,100}\.yaml$")


class UploadTooLarge(InputError):
    """The body is over the size limit."""


class UnsafePath(InputError):
    """The target would be outside the workspace."""


def inside(root: Path, relative: str) -> Path:
    """``root / relative`` if that stays inside ``root`` (after following links), else UnsafePath."""
    text = str(relative).replace("\\", "/")
    pure = PurePosixPath(text)
    if not text or pure.is_absolute() or ".." in pure.parts or re.match(r"^[A-Za-z]:", text) or "\x00" in text:
        raise UnsafePath(f"'{relative}' is not a path inside the workspace", value=relative, reason="unsafe_path",
                         hint="name a file inside the workspace, without '..' or a leading '/'")
    base = root.resolve()
    target = (base / pure).resolve()
    if target != base and base not in target.parents:
        raise UnsafePath(f"'{relative}' leads outside the workspace (a symbolic link?)", value=relative,
                         reason="unsafe_path", hint="uploads only replace files inside the workspace folder")
    return target


async def stream_to_temp(chunks: AsyncIterator[bytes], target: Path, limit: int) -> Path:
    """Write chunks to a temporary file beside ``target``; removed again on any failure."""
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".upload", dir=target.parent)
    temp = Path(name)
    size = 0
    try:
        with os.fdopen(handle, "wb") as out:
            async for chunk in chunks:
                size += len(chunk)
                if size > limit:
                    raise UploadTooLarge(f"the upload is larger than the limit of {limit} bytes",
                                         file=target.name, reason="too_large",
                                         hint="raise the server's --max-upload-mb, or split the export")
                out.write(chunk)
            out.flush()
            os.fsync(out.fileno())
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return temp


def publish(temp: Path, target: Path) -> None:
    """Rename the finished temporary file over the target and make the rename durable."""
    os.replace(temp, target)
    folder = os.open(target.parent, os.O_RDONLY)
    try:
        os.fsync(folder)
    finally:
        os.close(folder)


def source_target(root: Path, source: str) -> Path:
    """The data file a source's mapping reads (must be a file inside the workspace)."""
    ws = load_workspace(root)
    for entry in ws.sources:
        if entry.mapping.source == source:
            if entry.mapping.read.path is None:
                raise InputError(f"source '{source}' is read from a database, not a file", value=source,
                                 reason="not_a_file", hint="upload exports only for sources read from files")
            return inside(root, str(entry.mapping.read.path))
    raise InputError(f"no source named '{source}'", value=source, reason="unknown_source",
                     hint="sources: " + ", ".join(e.mapping.source for e in ws.sources))


def mapping_target(root: Path, name: str) -> Path:
    if not MAPPING_NAME.match(name):
        raise UnsafePath(f"'{name}' is not a mapping file name", value=name, reason="unsafe_path",
                         hint="a mapping file is NAME.yaml (letters, digits, '_', '-', '.')")
    return inside(root, f"{MAPPINGS_DIR}/{name}")


def check_mapping_upload(root: Path, name: str, temp: Path) -> list[Finding]:
    """The errors ``integrate check`` would report with the uploaded file in place (none: it may go in).

    The check runs on a shadow of the workspace: its mapping files copied, the new one among them,
    and every other entry of the workspace linked, so the real workspace is never touched.
    """
    from ..mapping.checks import check_workspace

    with tempfile.TemporaryDirectory(prefix="integrate-check-") as scratch:
        shadow = Path(scratch)
        mappings = shadow / MAPPINGS_DIR
        shutil.copytree(root / MAPPINGS_DIR, mappings, ignore=shutil.ignore_patterns(".*"))
        shutil.copyfile(temp, mappings / name)
        for entry in root.iterdir():
            if entry.name not in (MAPPINGS_DIR,) and not entry.name.startswith(".integrate"):
                (shadow / entry.name).symlink_to(entry.resolve(), target_is_directory=entry.is_dir())
        report = check_workspace(shadow, use_last_run=False)
    return [f for f in report.findings if f.level == "error"]


__all__ = ["CANONICAL_FILE", "inside", "stream_to_temp", "publish", "source_target", "mapping_target",
           "check_mapping_upload", "UploadTooLarge", "UnsafePath"]
