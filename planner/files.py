"""Safe file output: atomic replacement, output names derived from scene names, no escapes.

A reader of an output file sees either the old complete file or the new complete file, never a
part of one; a scene's name can never steer an output outside the output folder.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import secrets
from pathlib import Path

__all__ = ["atomic_write", "output_stem", "output_path", "is_temp_name"]

_SCENE_SUFFIXES = (".yaml", ".yml", ".json")
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]")
_TEMP = re.compile(r"\A\..+\.tmp-\d+-[0-9a-f]{8}\Z")
_MAX_STEM = 120  # leaves room for suffixes within the usual 255-byte name limit
_FALLBACK_STEM = "scene"
_WINDOWS_DEVICES = {"CON", "PRN", "AUX", "NUL", "CONIN$", "CONOUT$"} | {
    f"{name}{i}" for name in ("COM", "LPT") for i in range(10)
}


def _temp_name(name: str) -> str:
    return f".{name}.tmp-{os.getpid()}-{secrets.token_hex(4)}"


def is_temp_name(name: str) -> bool:
    """True for the hidden temp names atomic_write uses (`.<name>.tmp-<pid>-<random>`).

    Watchers and cleaners use it to ignore, or remove after a crash, half-written files.
    """
    return bool(_TEMP.match(name))


def atomic_write(path: Path, data: str | bytes) -> None:
    """Replace `path` with `data` (str is written as UTF-8) so that readers never see a part.

    Writes a hidden temp file in the same folder, flushes and fsyncs it, renames it over `path`
    (atomic on POSIX and Windows) and fsyncs the folder so the rename survives a power cut. On
    any failure the temp file is removed and the old file, if any, is left as it was.
    """
    path = Path(path)
    if isinstance(data, str):
        data = data.encode("utf-8")
    elif not isinstance(data, bytes | bytearray | memoryview):
        raise TypeError(f"atomic_write takes str or bytes, not {type(data).__name__}")
    tmp = path.with_name(_temp_name(path.name))
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0)
    fd = os.open(tmp, flags, 0o666)  # the umask decides, as for any new file
    try:
        with os.fdopen(fd, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    _fsync_folder(path.parent)


def _fsync_folder(folder: Path) -> None:
    """Make a rename in `folder` durable; a no-op where folders cannot be opened (Windows)."""
    if not hasattr(os, "O_DIRECTORY"):
        return
    try:
        fd = os.open(folder, os.O_RDONLY | os.O_DIRECTORY)
    except OSError:
        return
    try:
        # some file systems refuse fsync on a folder; the file itself is already complete
        with contextlib.suppress(OSError):
            os.fsync(fd)
    finally:
        os.close(fd)


def output_stem(scene_path: Path) -> str:
    """The base of a scene's output names: its file name without .yaml/.yml/.json, made safe.

    Only [A-Za-z0-9._-] are kept (anything else becomes `_`), leading and trailing dots go (no
    hidden files, no Windows trouble), Windows device names get a leading `_`, and the result is
    never empty. A very long name is cut and gets a short hash of the full name, so two long names
    do not collide. Different names can still sanitise to the same stem (`a b` and `a_b`).
    """
    name = Path(scene_path).name
    for suffix in _SCENE_SUFFIXES:
        if name.lower().endswith(suffix) and len(name) > len(suffix):
            name = name[: -len(suffix)]
            break
    stem = _UNSAFE.sub("_", name).strip(".")
    if not stem:
        stem = _FALLBACK_STEM
    if stem.split(".")[0].upper() in _WINDOWS_DEVICES:
        stem = "_" + stem
    if len(stem) > _MAX_STEM:
        digest = hashlib.sha256(name.encode("utf-8", "surrogatepass")).hexdigest()[:10]
        stem = stem[: _MAX_STEM - 11].rstrip(".") + "-" + digest
    return stem


def output_path(out_dir: Path, stem: str, suffix: str) -> Path:
    """`out_dir / (stem + suffix)`, refusing (ValueError) any name that would land elsewhere.

    The name must be a single plain file name, and the resolved path (symlinks followed) must be
    directly inside the resolved `out_dir`.
    """
    out_dir = Path(out_dir)
    name = f"{stem}{suffix}"
    separators = {"/", "\\", os.sep} | ({os.altsep} if os.altsep else set())
    if (
        not stem
        or name in (".", "..")
        or "\0" in name
        or any(sep in name for sep in separators)
        or (os.name == "nt" and ":" in name)
    ):
        raise ValueError(f"refusing output name {name!r}: it must be a plain file name")
    target = out_dir / name
    folder = out_dir.resolve()
    if target.resolve().parent != folder:
        raise ValueError(
            f"refusing to write {target}: it resolves outside the output folder {folder}"
        )
    return target
