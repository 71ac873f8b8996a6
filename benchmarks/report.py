"""Turn benchmark results (plain dicts, see benchmarks.run) into docs/performance.md Markdown.

Pure formatting: medians, growth exponents and tables; no timing happens here.
"""

from __future__ import annotations

import math
from statistics import median

__all__ = ["STAGES", "exponent", "results_markdown", "splice"]

GROWTH_FROM = 20_000
STAGES = ("load", "cspace", "roadmap", "queries", "plan", "verify", "write")
BEGIN = "<!-- bench:begin (written by python -m benchmarks.run; edit outside these marks) -->"
END = "<!-- bench:end -->"


def exponent(n1: float, t1: float, n2: float, t2: float) -> float:
    """Growth exponent k of t ~ n^k between two sizes (nan when undefined)."""
    if min(n1, n2, t1, t2) <= 0 or n1 == n2:
        return math.nan
    return math.log(t2 / t1) / math.log(n2 / n1)


def _f(v: float, digits: int = 2) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    if isinstance(v, float) and math.isinf(v):
        return "inf"
    return f"{v:.{digits}f}"


def _k(n: int) -> str:
    return f"{n // 1000}k" if n >= 1000 else str(n)


def stage_cpu(run: dict, stage: str) -> float:
    """Median CPU seconds of a stage over the repeats of one size."""
    return median(r["stages"][stage]["cpu_s"] for r in run["stages"])


def _stage_table(runs: list[dict]) -> list[str]:
    head = ("| scene | vertices | obstacles | grown shapes | nodes | " + " | ".join(STAGES)
            + " | leg (cold) median / max ms | `sidestep plan` wall / CPU s | peak MiB |")
    out = [head, "|" + " --- |" * (head.count("|") - 1)]
    for run in runs:
        first = run["stages"][0]
        cells = [f"{run['kind']} {_k(run['size'])}", str(first["vertices"]),
                 str(first["obstacles"]), str(first.get("cspace", {}).get("pieces", "-")),
                 str(first["roadmap"]["nodes"])]
        cells += [_f(stage_cpu(run, s)) for s in STAGES]
        cold = [median(vals) for vals in zip(*(r["cold_leg_cpu_s"] for r in run["stages"]),
                                             strict=True)]
        cells.append(f"{_f(1000 * median(cold), 1)} / {_f(1000 * max(cold), 1)}")
        e2e = run["e2e"]
        cells.append(f"{_f(median(e['wall_s'] for e in e2e))} / "
                     f"{_f(median(e['cpu_s'] for e in e2e))}")
        cells.append(_f(max(e["peak_rss_mib"] for e in e2e), 0))
        out.append("| " + " | ".join(cells) + " |")
    return out


def _growth_table(runs: list[dict]) -> list[str]:
    stages = ("cspace", "roadmap", "load", "plan")
    out = ["| kind | sizes | " + " | ".join(stages) + " | `sidestep plan` CPU | reflex vertices |",
           "|" + " --- |" * (len(stages) + 4)]
    by_kind: dict[str, list[dict]] = {}
    for run in runs:
        by_kind.setdefault(run["kind"], []).append(run)
    for kind, rs in by_kind.items():
        rs = sorted(rs, key=lambda r: r["size"])
        pairs = list(zip(rs[:-1], rs[1:], strict=True))
        mid = [r for r in rs if r["size"] == GROWTH_FROM]
        if mid and mid[0] is not rs[-1] and mid[0] is not rs[-2]:
            pairs.append((mid[0], rs[-1]))  # the span the configuration-space target is about
        for a, b in pairs:
            na, nb = a["stages"][0]["vertices"], b["stages"][0]["vertices"]
            cells = [kind, f"{_k(a['size'])} -> {_k(b['size'])}"]
            cells += [_f(exponent(na, stage_cpu(a, s), nb, stage_cpu(b, s))) for s in stages]
            ea = median(e["cpu_s"] for e in a["e2e"])
            eb = median(e["cpu_s"] for e in b["e2e"])
            cells.append(_f(exponent(na, ea, nb, eb)))
            ca, cb = a["stages"][0].get("cspace"), b["stages"][0].get("cspace")
            if ca and cb:
                cells.append(_f(exponent(na, ca["reflex_input_vertices"], nb,
                                         cb["reflex_input_vertices"])))
            else:
                cells.append("-")
            out.append("| " + " | ".join(cells) + " |")
    return out


def _roadmap_table(runs: list[dict]) -> list[str]:
    parts = ("corners", "triangulate", "walk", "disks", "bitangent", "exact-visibility")
    out = ["| scene | triangles | walk pairs | edges | " + " | ".join(parts) + " |",
           "|" + " --- |" * (len(parts) + 4)]
    for run in runs:
        first = run["stages"][0]
        secs = [median(r["roadmap_seconds"].get(p, math.nan) for r in run["stages"])
                for p in parts]
        rm = first["roadmap"]
        out.append("| " + " | ".join([f"{run['kind']} {_k(run['size'])}", str(rm["triangles"]),
                                      str(rm["walk-pairs"]), str(rm["edges"])]
                                     + [_f(s) for s in secs]) + " |")
    return out


def _adapter_table(runs: list[dict]) -> list[str]:
    names = sorted({n for run in runs for r in run["stages"] for n in r["adapter_cpu_s"]})
    out = ["| scene | " + " | ".join(names) + " | route file and the rest |",
           "|" + " --- |" * (len(names) + 2)]
    for run in runs:
        vals = [median(r["adapter_cpu_s"].get(n, 0.0) for r in run["stages"]) for n in names]
        rest = stage_cpu(run, "write") - sum(vals)
        out.append("| " + " | ".join([f"{run['kind']} {_k(run['size'])}"]
                                     + [_f(v) for v in vals] + [_f(rest)]) + " |")
    return out


def _baseline_section(grids: list[dict]) -> list[str]:
    out = []
    for g in grids:
        legs = g["legs"]
        both = [leg for leg in legs if math.isfinite(leg["ours_length"])
                and math.isfinite(leg["grid_length"])]
        ratio = [leg["grid_cpu_s"] / leg["ours_cpu_s"] for leg in both if leg["ours_cpu_s"] > 0]
        excess = [leg["grid_length"] / leg["ours_length"] - 1 for leg in both
                  if leg["ours_length"] > 0]
        longer = [leg for leg in both if leg["ours_length"] > leg["grid_length"] + 1e-9]
        unsafe = [leg for leg in legs if leg["grid_unsafe"]]
        naive = [leg for leg in legs if math.isfinite(leg.get("naive_length", math.inf))]
        naive_unsafe = [leg for leg in naive if leg["naive_unsafe"]]
        ours_unsafe = [leg for leg in legs if leg["ours_unsafe"]]
        no_grid = [leg for leg in legs if math.isfinite(leg["ours_length"])
                   and not math.isfinite(leg["grid_length"])]
        ny, nx = g["grid_shape"]
        out += [
            f"**{g['kind']} {_k(g['size'])}** ({len(legs)} legs, grid {nx} x {ny} cells of "
            f"{g['cell']:g} {g['units']}, {100 * g['blocked_share']:.0f}% blocked after "
            f"dilation, rasterised in {g['raster_cpu_s']:.2f} s CPU):",
            "",
            "| per leg | median | min | max |",
            "| --- | --- | --- | --- |",
        ]
        if both:
            out += [
                f"| grid CPU s | {_f(median(leg['grid_cpu_s'] for leg in both), 3)} | "
                f"{_f(min(leg['grid_cpu_s'] for leg in both), 3)} | "
                f"{_f(max(leg['grid_cpu_s'] for leg in both), 3)} |",
                f"| ours CPU ms (cold query) | "
                f"{_f(1000 * median(leg['ours_cpu_s'] for leg in both), 2)} | "
                f"{_f(1000 * min(leg['ours_cpu_s'] for leg in both), 2)} | "
                f"{_f(1000 * max(leg['ours_cpu_s'] for leg in both), 2)} |",
                f"| speed-up (grid / ours) | {_f(median(ratio), 0)}x | {_f(min(ratio), 0)}x | "
                f"{_f(max(ratio), 0)}x |",
                f"| grid length over ours | {_f(100 * median(excess), 1)}% | "
                f"{_f(100 * min(excess), 1)}% | {_f(100 * max(excess), 1)}% |",
            ]
        out += [
            "",
            f"Legs where ours is longer than the grid's: {len(longer)}. Grid legs unsafe by "
            f"planner.verify: {len(unsafe)} of {len(legs)}"
            + (f" ({', '.join(sorted({k for leg in unsafe for k in leg['grid_unsafe']}))})"
               if unsafe else "")
            + f". Our legs unsafe: {len(ours_unsafe)}. Legs we plan but the grid cannot "
            f"connect: {len(no_grid)}. Without the one-cell dilation (cell centres only) the "
            f"grid's path is unsafe on {len(naive_unsafe)} of {len(naive)} legs.",
            "",
        ]
    return out


def results_markdown(res: dict) -> str:
    """The generated part of docs/performance.md."""
    m = res["machine"]
    runs = res["runs"]
    lines = [
        BEGIN,
        "",
        f"Made by `{res['command']}` on {res['date']} ({res['repeat']} runs per size, medians; "
        f"seed {res['seed']}, {res['targets']} targets).",
        "",
        f"Machine: {m['nproc']} CPUs ({m['cpu']}), {m['mem_gib']:.0f} GiB; Python {m['python']}, "
        f"numpy {m['numpy']}, shapely {m['shapely']}, GEOS {m['geos']}, scipy {m['scipy']}, "
        f"scikit-image {m['skimage']}. Load average before / after: "
        f"{m['load_before']} / {m['load_after']} (the machine is shared: CPU seconds are the "
        "figures to compare; wall seconds include waiting for a core).",
        "",
        "### Stages (CPU seconds, medians)",
        "",
        "grown shapes = the C-obstacle pieces the configuration space unites (one per "
        "non-convex outline by convolution, one per convex outline, circle or convex piece of a "
        "fallback). "
        "load = read, parse and validate the scene; cspace = configuration space; roadmap = the "
        "visibility road map; queries = every leg of the route by `Roadmap.path`; plan = "
        "`plan_scene` on the built road map (queries, explanations of unreachable targets, "
        "rounding, the safety check); verify = the safety check alone; write = every enabled "
        "adapter and the route file. Leg (cold) = one `Roadmap.path` with neither end seen "
        "before. `sidestep plan` = the command as a fresh process, start to files written "
        "(peak = its maximum resident set).",
        "",
        *_stage_table(runs),
        "",
        "### Growth exponents (k in t ~ n^k, from CPU medians)",
        "",
        "n is the number of obstacle vertices, except in the last column: how the count of "
        "reflex (inward-turning) vertices grows with n in these scenes (a convex decomposition's "
        "work follows these; the convolution's follows all vertices).",
        "",
        *_growth_table(runs),
        "",
        "### Road map build (wall seconds, medians)",
        "",
        *_roadmap_table(runs),
        "",
        "### Writing, per adapter (CPU seconds, medians)",
        "",
        *_adapter_table(runs),
        "",
    ]
    if res.get("baseline"):
        lines += ["### Against the grid baseline (one run, same process for both)", "",
                  *_baseline_section(res["baseline"])]
    checks = res.get("checks", [])
    if checks:
        lines += ["### Targets", "", "| target | measured | met |", "| --- | --- | --- |"]
        lines += [f"| {c['target']} | {c['measured']} | {'yes' if c['met'] else '**no**'} |"
                  for c in checks]
        lines.append("")
    if res.get("profile"):
        lines += ["### Profile of `sidestep plan` on sparse 100k (pyinstrument, wall)", "",
                  "```", res["profile"].rstrip(), "```", ""]
    lines.append(END)
    return "\n".join(lines) + "\n"


def splice(page: str, generated: str) -> str:
    """`page` with the text between the bench marks replaced (appended when there are none)."""
    if BEGIN in page and END in page:
        head, rest = page.split(BEGIN, 1)
        _, tail = rest.split(END, 1)
        return head + generated.rstrip("\n") + tail
    return page.rstrip("\n") + "\n\n" + generated
