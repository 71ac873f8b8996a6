"""The daemon's small parts on their own: settling, which names are scenes, the watch settings."""

from __future__ import annotations

import os
from datetime import UTC, datetime

import pytest

from planner.config import Settings
from planner.debounce import MISSING, NOT_A_FILE, Settler, file_signature
from planner.dropnames import why_not_a_scene
from planner.errors import ConfigError
from planner.watchopts import WatchOptions, watch_options

# ----------------------------------------------------------------------------- settling
# Debounce semantics (common practice, no source): a key is due once its signature has been the
# same for the whole settle time, measured from the last change or event; it is handed out once.


def test_a_key_is_due_only_after_its_signature_held_still_for_the_settle_time():
    settler = Settler(settle_s=1.0)
    sigs = {"a.yaml": (10, 1)}
    settler.note("a.yaml", sigs["a.yaml"], now=0.0)
    assert settler.due(0.5, sigs.__getitem__) == []
    sigs["a.yaml"] = (20, 2)  # a chunk arrived at t=0.9
    assert settler.due(0.9, sigs.__getitem__) == []
    assert settler.due(1.5, sigs.__getitem__) == []  # only 0.6 s since the last change
    ready = settler.due(1.95, sigs.__getitem__)
    assert [key for key, _, _ in ready] == ["a.yaml"]
    assert ready[0][1] == (20, 2) and ready[0][2] == 0.9
    assert settler.due(5.0, sigs.__getitem__) == []  # handed out once
    assert len(settler) == 0


def test_an_event_restarts_the_settle_time_even_when_the_signature_looks_the_same():
    # Coarse time stamps (FAT keeps 2 s steps: from memory of the FAT specification) can hide a
    # write; an event is taken as a change.
    settler = Settler(settle_s=1.0)
    settler.note("a.yaml", (5, 0), now=0.0)
    settler.note("a.yaml", (5, 0), now=0.8)
    assert settler.due(1.2, lambda key: (5, 0)) == []
    assert [k for k, _, _ in settler.due(1.8, lambda key: (5, 0))] == ["a.yaml"]


def test_retry_waits_until_its_time_and_a_new_change_cancels_the_wait():
    settler = Settler(settle_s=0.5)
    settler.retry("b.yaml", (1, 1), changed_at=0.0, at=3.0)
    assert settler.due(2.0, lambda key: (1, 1)) == []
    assert [k for k, _, _ in settler.due(3.0, lambda key: (1, 1))] == ["b.yaml"]
    settler.retry("b.yaml", (1, 1), changed_at=0.0, at=10.0)
    settler.note("b.yaml", (2, 2), now=4.0)  # saved again: handled after the settle time
    assert [k for k, _, _ in settler.due(4.6, lambda key: (2, 2))] == ["b.yaml"]


def test_due_keys_come_oldest_change_first_and_next_check_says_when_to_look():
    settler = Settler(settle_s=1.0)
    settler.note("late.yaml", (1,), now=0.5)
    settler.note("early.yaml", (1,), now=0.0)
    assert settler.next_check(0.6, poll_s=0.05) == pytest.approx(0.05)
    assert settler.next_check(0.98, poll_s=0.05) == pytest.approx(0.02)
    assert settler.next_check(1.2, poll_s=0.05) == 0.0  # early.yaml is due now
    assert [k for k, _, _ in settler.due(2.0, lambda key: (1,))] == ["early.yaml", "late.yaml"]
    assert settler.next_check(2.0, poll_s=0.05) is None


def test_file_signature_tells_missing_links_and_rewrites_apart(tmp_path):
    path = tmp_path / "s.yaml"
    assert file_signature(path) == MISSING
    path.write_text("a: 1\n")
    first = file_signature(path)
    link = tmp_path / "l.yaml"
    link.symlink_to(path)
    assert file_signature(link) == NOT_A_FILE
    (tmp_path / "d.yaml").mkdir()
    assert file_signature(tmp_path / "d.yaml") == NOT_A_FILE
    # Replaced by rename with the same size and mtime: the inode differs (POSIX rename(2)).
    other = tmp_path / "tmp"
    other.write_text("b: 2\n")
    st = os.stat(path)
    os.utime(other, ns=(st.st_atime_ns, st.st_mtime_ns))
    os.replace(other, path)
    assert file_signature(path) != first


# ------------------------------------------------------------------------- scene names
@pytest.mark.parametrize("name", ["job-0412.yaml", "Table 3.YML", "a.b.yml", "x~y.yaml"])
def test_scene_names_are_accepted(name):
    assert why_not_a_scene(name) is None


@pytest.mark.parametrize(
    "name",
    [
        ".job.yaml.swp",  # vim swap file (vim :help swap-file)
        ".job.yaml.swx",  # vim's second swap name (vim :help swap-file)
        "4913",  # vim's write test file (vim :help backupcopy, from memory)
        "job.yaml~",  # backup file (GNU Emacs manual, "Backup Names")
        "#job.yaml#",  # auto-save file (GNU Emacs manual, "Auto Save Files")
        ".#job.yaml",  # lock link (GNU Emacs manual, "Protection against Simultaneous Editing")
        "~$job.yaml",  # office suites' owner file (from memory)
        ".goutputstream-A1B2C3",  # GNOME's atomic save temp (from memory)
        ".job.yaml.Xa9b2c",  # rsync's temporary file (rsync(1), --temp-dir / --partial)
        "job.yaml.part",  # browsers' and copy tools' partial download (from memory)
        "job.yaml.crdownload",  # Chromium's partial download (from memory)
        "job.route.yaml",  # our own output
        "notes.txt",
        "status.json",
    ],
)
def test_temporary_hidden_and_own_files_are_never_scenes(name):
    assert why_not_a_scene(name) is not None


def test_ignore_patterns_from_config_apply_case_insensitively():
    assert why_not_a_scene("DRAFT-job.yaml", ["draft-*"]) is not None
    assert why_not_a_scene("job.yaml", ["draft-*"]) is None


# ------------------------------------------------------------------------ watch options
def test_watch_options_defaults_and_overrides():
    assert watch_options(Settings()) == WatchOptions()
    options = watch_options(Settings(watch={"observer": "polling", "settle_s": 0.5,
                                            "parse_wait_s": 1, "ignore": ["draft-*"]}))
    assert options.observer == "polling" and options.settle_s == 0.5
    assert options.parse_wait_s == 1.0 and options.ignore == ("draft-*",)


@pytest.mark.parametrize(
    "watch, where",
    [
        ({"settle": 1}, "watch.settle"),
        ({"observer": "inotify"}, "watch.observer"),
        ({"settle_s": -1}, "watch.settle_s"),
        ({"settle_s": "2s"}, "watch.settle_s"),
        ({"heartbeat_s": 0}, "watch.heartbeat_s"),
        ({"settle_s": 3, "parse_wait_s": 1}, "watch.parse_wait_s"),
        ({"cache_size": 2.5}, "watch.cache_size"),
        ({"ignore": "*.bak"}, "watch.ignore"),
    ],
)
def test_bad_watch_settings_name_the_key_and_the_fix(watch, where):
    with pytest.raises(ConfigError) as info:
        watch_options(Settings(watch=watch))
    assert info.value.path == where
    assert info.value.hint


def test_utc_stamps_are_iso_8601():
    from planner.watchstate import utc_stamp

    # ISO 8601 / RFC 3339 UTC times; datetime.fromisoformat reads them (Python 3.11 docs).
    moment = datetime.fromisoformat(utc_stamp(0.0))
    assert moment == datetime(1970, 1, 1, tzinfo=UTC)
    assert utc_stamp(1.2345).endswith(".234Z")
