"""Safe output: atomic replacement under concurrent reads, clean failures, safe names."""

from __future__ import annotations

import os
import re
import threading
import time
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner import files
from planner.files import atomic_write, is_temp_name, output_path, output_stem

SIZE = 2 * 1024 * 1024


def version(n: int) -> bytes:
    """A large file whose every byte says which version it is, so a mix or a cut shows."""
    head = b"version %06d\n" % n
    body = bytes([65 + n % 26]) * (SIZE - len(head))
    return head + body


def torn_reads(path: Path, write, versions: int, min_reads: int = 20) -> tuple[int, int]:
    """Run `write(path, data)` for many versions while a reader loops; (reads, torn reads)."""
    write(path, version(0))
    done = threading.Event()
    counts = {"reads": 0, "torn": 0}

    def reader():
        while not done.is_set() or counts["reads"] < min_reads:
            data = path.read_bytes()
            counts["reads"] += 1
            n = int(data[8:14]) if data[:8] == b"version " and data[8:14].isdigit() else -1
            if n < 0 or data != version(n):
                counts["torn"] += 1

    thread = threading.Thread(target=reader)
    thread.start()
    try:
        for n in range(1, versions + 1):
            write(path, version(n))
    finally:
        done.set()
        thread.join()
    return counts["reads"], counts["torn"]


def test_concurrent_reader_never_sees_a_partial_file(tmp_path):
    # Source: POSIX rename(2) (IEEE Std 1003.1) replaces the target atomically: any open() sees
    # the old file or the new one, which is the guarantee atomic_write builds on.
    reads, torn = torn_reads(tmp_path / "big.route.yaml", atomic_write, versions=40)
    assert reads >= 20 and torn == 0
    assert [p.name for p in tmp_path.iterdir()] == ["big.route.yaml"]


def test_the_reader_loop_does_catch_a_writer_that_is_not_atomic(tmp_path):
    # Control for the test above: the same reader sees torn files from an in-place writer.
    def in_place(path: Path, data: bytes) -> None:
        with open(path, "wb") as out:
            for start in range(0, len(data), SIZE // 4):
                out.write(data[start:start + SIZE // 4])
                out.flush()
                time.sleep(0.002)

    _, torn = torn_reads(tmp_path / "big.route.yaml", in_place, versions=40)
    assert torn > 0


def test_text_is_written_as_utf8_and_bytes_as_given(tmp_path):
    path = tmp_path / "out.csv"
    atomic_write(path, "x;ÿ\r\n")
    assert path.read_bytes() == "x;ÿ\r\n".encode()
    atomic_write(path, b"\x00\xff")
    assert path.read_bytes() == b"\x00\xff"
    with pytest.raises(TypeError):
        atomic_write(path, 12)


@pytest.mark.parametrize("broken", ["replace", "fsync"])
def test_failure_mid_write_keeps_the_old_file_and_leaves_no_temp(tmp_path, monkeypatch, broken):
    path = tmp_path / "job.route.yaml"
    atomic_write(path, "old\n")

    def fail(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(files.os, broken, fail)
    with pytest.raises(OSError):
        atomic_write(path, "new\n" * 1000)
    monkeypatch.undo()
    assert path.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["job.route.yaml"]


def test_interrupt_mid_write_leaves_no_temp(tmp_path, monkeypatch):
    path = tmp_path / "job.nc"

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(files.os, "fsync", interrupt)
    with pytest.raises(KeyboardInterrupt):
        atomic_write(path, "G0 X0 Y0\n")
    monkeypatch.undo()
    assert list(tmp_path.iterdir()) == []


def test_temp_file_is_hidden_recognisable_and_beside_the_target(tmp_path, monkeypatch):
    seen = []
    real_replace = os.replace

    def spy(src, dst):
        seen.append((Path(src), Path(dst)))
        real_replace(src, dst)

    monkeypatch.setattr(files.os, "replace", spy)
    atomic_write(tmp_path / "job.csv", "a\n")
    (src, dst), = seen
    assert src.parent == dst.parent == tmp_path
    assert src.name.startswith(".job.csv.tmp-") and is_temp_name(src.name)
    assert not is_temp_name("job.csv") and not is_temp_name(".job.csv")


@pytest.mark.parametrize("name, stem", [
    ("job-0412.yaml", "job-0412"),
    ("job-0412.yml", "job-0412"),
    ("job-0412.json", "job-0412"),
    ("Job.YAML", "Job"),
    ("scene.yaml.yaml", "scene.yaml"),
    ("table 3 (copy).yaml", "table_3__copy_"),
    ("plätt.yaml", "pl_tt"),
    (".hidden.yaml", "hidden"),
    ("...yaml", "scene"),
    ("trailing..yaml", "trailing"),
    (".yaml", "yaml"),
    ("CON.yaml", "_CON"),
    ("nul.part.yaml", "_nul.part"),
    ("lpt1.yml", "_lpt1"),
    ("console.yaml", "console"),
    ("a\\b.yaml", "a_b"),
    ("../../etc/passwd.yaml", "passwd"),
])
def test_output_stem_examples(name, stem):
    # Windows device names (CON, NUL, LPT1, ... with any extension) are from memory of
    # Microsoft's "Naming Files, Paths, and Namespaces".
    assert output_stem(Path(name)) == stem


def test_long_names_are_cut_and_stay_distinct():
    a = output_stem(Path("x" * 300 + "a.yaml"))
    b = output_stem(Path("x" * 300 + "b.yaml"))
    assert len(a) <= 120 and len(b) <= 120 and a != b


SAFE = re.compile(r"\A[A-Za-z0-9_-][A-Za-z0-9._-]*\Z")


@settings(max_examples=300, deadline=None)
@given(st.text(min_size=1, max_size=300).filter(lambda s: "/" not in s and "\0" not in s))
def test_any_name_gives_a_safe_stem(name):
    stem = output_stem(Path(name))
    assert SAFE.match(stem) and not stem.endswith(".") and len(stem) <= 120
    assert stem.split(".")[0].upper() not in {"CON", "PRN", "AUX", "NUL", "COM1", "LPT1"}


def test_output_path_inside_the_folder(tmp_path):
    assert output_path(tmp_path, "job", ".route.yaml") == tmp_path / "job.route.yaml"


@pytest.mark.parametrize("stem, suffix", [
    ("../x", ".csv"), ("..", ""), (".", ""), ("a/b", ".csv"), ("x", "/../../y"), ("", ".csv"),
    ("a\\..\\..\\b", ".nc"), ("a\0b", ".csv"),
])
def test_output_path_refuses_escapes(tmp_path, stem, suffix):
    with pytest.raises(ValueError):
        output_path(tmp_path, stem, suffix)


def test_output_path_refuses_a_symlink_that_leads_outside(tmp_path):
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    out = tmp_path / "out"
    out.mkdir()
    (out / "job.csv").symlink_to(outside / "job.csv")
    with pytest.raises(ValueError, match="outside"):
        output_path(out, "job", ".csv")
    linked = tmp_path / "linked-out"
    linked.symlink_to(out)  # the output folder itself may be a link
    assert output_path(linked, "job", ".nc") == linked / "job.nc"
