"""Content-addressed storage of raw uploads under MEDIA_ROOT/uploads/<sha[:2]>/<sha>."""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from pathlib import Path
from typing import BinaryIO

from django.conf import settings

CHUNK = 1024 * 1024


def uploads_root() -> Path:
    return Path(settings.MEDIA_ROOT) / "uploads"


def raw_file_store(stream: BinaryIO) -> tuple[str, int, str]:
    """Copy ``stream`` into the store; return (sha256, size, path relative to MEDIA_ROOT).

    The same content is stored once however often it is uploaded.
    """
    root = uploads_root()
    root.mkdir(parents=True, exist_ok=True)
    digest = hashlib.sha256()
    size = 0
    fd, tmp_name = tempfile.mkstemp(dir=root, prefix=".incoming-")
    try:
        with os.fdopen(fd, "wb") as out:
            while chunk := stream.read(CHUNK):
                digest.update(chunk)
                size += len(chunk)
                out.write(chunk)
        sha = digest.hexdigest()
        target = root / sha[:2] / sha
        target.parent.mkdir(exist_ok=True)
        if target.exists():
            os.unlink(tmp_name)
        else:
            os.replace(tmp_name, target)
    except BaseException:
        if os.path.exists(tmp_name):
            os.unlink(tmp_name)
        raise
    return sha, size, str(target.relative_to(settings.MEDIA_ROOT))


def raw_file_path(relative: str) -> Path:
    return Path(settings.MEDIA_ROOT) / relative


def raw_file_copy_from_path(path: Path) -> tuple[str, int, str]:
    with open(path, "rb") as fh:
        return raw_file_store(fh)


def disk_free_bytes() -> int:
    root = uploads_root()
    root.mkdir(parents=True, exist_ok=True)
    return shutil.disk_usage(root).free
