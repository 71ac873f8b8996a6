"""Profile one `sidestep plan` in this process with pyinstrument (from PyPI, the `test` extra).

Run: .venv/bin/python -m benchmarks.profile SCENE.yaml OUT_DIR
Prints the call tree (entries of at least 2% of the time) and then the functions with the most
time of their own. The profiler starts before the planner is imported, so imports count too.
"""

from __future__ import annotations

import sys
from pathlib import Path


def profile_plan(scene: Path, out_dir: Path, *, threshold: float = 0.02, top: int = 15) -> str:
    """The profile's text: call tree, then the top `top` functions by own time."""
    from pyinstrument import Profiler

    prof = Profiler(interval=0.001)
    prof.start()
    from planner.config import load_settings
    from planner.jobs import run_job

    outcome = run_job(scene, out_dir, load_settings(None))
    prof.stop()
    tree = prof.output_text(unicode=False, color=False,
                            processor_options={"filter_threshold": threshold})
    flat = prof.output_text(unicode=False, color=False, flat=True)
    flat_lines = [ln for ln in flat.splitlines() if ln.strip()]
    body = [ln for ln in flat_lines if ln[:1].isdigit() or ln.lstrip()[:1].isdigit()][:top]
    text = (f"{scene.name}: {outcome.state}\n\n{tree.strip()}\n\nTop {top} by own time:\n"
            + "\n".join(body) + "\n")
    root = str(Path(__file__).resolve().parent.parent) + "/"
    return text.replace(root, "")  # no path of this machine in the published figures


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 2:
        print(__doc__, file=sys.stderr)
        return 2
    try:
        import pyinstrument  # noqa: F401
    except ImportError:
        print("pyinstrument is not installed (pip install -e '.[test]')", file=sys.stderr)
        return 2
    print(profile_plan(Path(args[0]), Path(args[1])))
    return 0


if __name__ == "__main__":
    sys.exit(main())
