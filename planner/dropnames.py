"""Which names in the drop folder are scenes: not hidden, `.yaml`/`.yml`, not an editor's temp file.

Editors and copy tools leave swap, backup and partial files beside the file being saved, and
the watcher's own outputs may share the folder; none of them may ever be planned.
"""

from __future__ import annotations

import fnmatch

__all__ = ["SCENE_SUFFIXES", "RESERVED_SUFFIXES", "DEFAULT_IGNORE", "why_not_a_scene"]

SCENE_SUFFIXES = (".yaml", ".yml")
# Names the planner writes itself (route files are YAML too: never read them back as scenes).
RESERVED_SUFFIXES = (".route.yaml", ".route.yml")
# Patterns matched against the whole name, case-insensitively. Hidden names (".x.swp", vim;
# ".#x", emacs lock; ".goutputstream-*", GNOME) are always ignored, and so are names without a
# scene suffix (x.yaml~, x.yaml.swp, x.yaml.tmp, x.yaml.part, x.yaml.crdownload, #x.yaml#).
DEFAULT_IGNORE = ("~$*", "*~", "#*#", "*.tmp.yaml", "*.tmp.yml", "*.part.yaml", "*.part.yml")


def why_not_a_scene(name: str, ignore: tuple[str, ...] | list[str] = DEFAULT_IGNORE) -> str | None:
    """None when `name` (a bare file name) is a scene to plan, else the reason it is skipped."""
    if not name or "/" in name or "\\" in name or name in (".", ".."):
        return "not a plain file name"
    if name.startswith("."):
        return "hidden name"
    lower = name.lower()
    if not lower.endswith(SCENE_SUFFIXES):
        return "not a scene (only .yaml and .yml files are planned)"
    if lower.endswith(RESERVED_SUFFIXES):
        return "reserved for route files (rename it if it is a scene)"
    for pattern in ignore:
        if fnmatch.fnmatchcase(lower, pattern.lower()):
            return f"matches the ignore pattern {pattern!r}"
    return None
