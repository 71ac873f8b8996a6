"""Move outputs that no longer describe their scene out of OUT (never delete them); error files.

A route left beside a scene that changed is the daemon's main hazard: the machine side would run
a path planned for a table that is no longer there. Moved files keep their name plus a time stamp
suffix, so nothing that looks for `*.route.yaml`, `*.csv` or `*.nc` can pick them up by mistake.
"""

from __future__ import annotations

import os
import stat
import time
from collections.abc import Iterable
from datetime import UTC, datetime
from pathlib import Path

import yaml

from .files import atomic_write

__all__ = [
    "SUPERSEDED_DIR",
    "ERROR_SUFFIX",
    "ROUTE_SUFFIX",
    "ensure_superseded_dir",
    "supersede",
    "outputs_of",
    "read_route_header",
    "write_error_file",
    "remove_error_file",
]

SUPERSEDED_DIR = "superseded"
ERROR_SUFFIX = ".error.txt"
ROUTE_SUFFIX = ".route.yaml"

_Loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def _stamp(t: float) -> str:
    moment = datetime.fromtimestamp(t, tz=UTC)
    return moment.strftime("%Y%m%dT%H%M%S.") + f"{moment.microsecond:06d}Z"


def _is_plain_file(path: Path) -> bool:
    try:
        return stat.S_ISREG(os.lstat(path).st_mode)
    except OSError:
        return False


def ensure_superseded_dir(out_dir: Path) -> Path:
    """OUT/superseded, created if needed; refuses a link or a file of that name (ValueError)."""
    folder = out_dir / SUPERSEDED_DIR
    if folder.is_symlink() or (folder.exists() and not folder.is_dir()):
        raise ValueError(f"{folder} must be a folder of its own, not a link or a file "
                         "(move it away and start again)")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def supersede(out_dir: Path, names: Iterable[str], now: float | None = None) -> list[Path]:
    """Move each existing file OUT/<name> to OUT/superseded/<name>.<UTC time stamp>, in order.

    Only plain files directly in OUT are moved (links and folders are left alone). Returns the
    new paths. Callers pass the route file first, so a reader never finds a route whose companions
    have already gone.
    """
    folder = ensure_superseded_dir(out_dir)
    stamp = _stamp(time.time() if now is None else now)
    moved: list[Path] = []
    for name in names:
        source = out_dir / name
        if Path(name).name != name or not _is_plain_file(source):
            continue
        target = folder / f"{name}.{stamp}"
        serial = 1
        while target.exists():
            serial += 1
            target = folder / f"{name}.{stamp}-{serial}"
        os.replace(source, target)
        moved.append(target)
    if moved:
        _sync_dir(out_dir)
    return moved


def _sync_dir(folder: Path) -> None:
    """Make renames in `folder` durable (best effort: not every file system allows it)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def read_route_header(path: Path) -> dict | None:
    """The top-level mapping of a route file, or None if it is missing, a link or not readable."""
    if not _is_plain_file(path):
        return None
    try:
        data = yaml.load(path.read_bytes(), Loader=_Loader)  # noqa: S506 - a safe loader
    except (OSError, yaml.YAMLError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def outputs_of(out_dir: Path, stem: str, adapter_suffixes: Iterable[str]) -> list[str]:
    """Names of the existing outputs of `stem` in OUT, route file first, then its companions.

    Companions are those the route file names and any `<stem><suffix>` of an installed adapter
    (left behind by an interrupted write or a since-disabled adapter). The error file is not one.
    """
    route_name = stem + ROUTE_SUFFIX
    names: list[str] = []
    if _is_plain_file(out_dir / route_name):
        names.append(route_name)
    header = read_route_header(out_dir / route_name)
    listed = header.get("files") if header else None
    candidates: list[str] = []
    if isinstance(listed, dict):
        candidates.extend(str(n) for n in listed)
    candidates.extend(stem + suffix for suffix in adapter_suffixes)
    for name in candidates:
        if (
            Path(name).name == name
            and name.startswith(stem + ".")
            and name not in names
            and name != route_name
            and not name.endswith(ERROR_SUFFIX)
            and _is_plain_file(out_dir / name)
        ):
            names.append(name)
    return names


def write_error_file(out_dir: Path, stem: str, message: str) -> str:
    """OUT/<stem>.error.txt with the message `plan` prints; returns its name."""
    name = stem + ERROR_SUFFIX
    atomic_write(out_dir / name, message.rstrip("\n") + "\n")
    return name


def remove_error_file(out_dir: Path, stem: str) -> bool:
    """Remove OUT/<stem>.error.txt (the daemon's own message) once the scene is fine or gone."""
    path = out_dir / (stem + ERROR_SUFFIX)
    if not _is_plain_file(path):
        return False
    try:
        path.unlink()
    except FileNotFoundError:
        return False
    return True
