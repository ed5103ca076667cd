"""Does a record's text say what its figures say? Used by the record tests on the examples."""

import json
import math
from pathlib import Path

from pypdf import PdfReader


def flat(text: str) -> str:
    return " ".join(text.split())


def disagreements(folder: Path) -> list[str]:
    """Every sentence of report.pdf that contradicts results.json (empty: they agree)."""
    doc = json.loads((folder / "results.json").read_text())
    text = flat("\n".join(p.extract_text() for p in PdfReader(folder / "report.pdf").pages))
    bad = []

    def need(s, why):
        if flat(s) not in text:
            bad.append(f"missing: {s!r} ({why})")

    def avoid(s, why):
        if flat(s) in text:
            bad.append(f"present: {s!r} ({why})")

    over = doc["over_limit"]
    (need if over else avoid)("Some accessible place is over its limit, or cannot be shown within it.", "headline")
    (avoid if over else need)("Every accessible area is within its limit", "headline")
    tiers = {a["name"]: a["exposure"] for a in doc["areas"]}
    comb = doc["combined"]
    for name, ratio in comb["max_ratio_by_area"].items():
        if tiers.get(name) == "none" or ratio is None:
            continue
        state = "OVER THE LIMIT" if ratio >= 1 else (
            "not shown within limit" if comb["masked_points_by_area"][name] else "within limit")
        need(f"{name}: {state}, worst {ratio:.2g} of the", f"verdict of {name}")
    for t in doc["transmissions"]:
        c = t["power_ceiling_w"]
        if c is None:
            need(f"{t['name']}: highest power within limits not limited", "ceiling")
        else:
            need(f"{t['name']}: highest power within limits {c:.0f} W PEP", "ceiling")
        md = t["model_distance_m"]
        if md is None:
            need("The model finds no point, on any floor, at or above the whole-body public limit", "distance")
        else:
            need(f"The model finds points at or above it out to {md:.1f} m", "distance")
        for k, cr in enumerate(t["crossings"], 1):
            need(f"{k}. {cr['line']} crosses", "crossing")
        if not [cr for cr in t["crossings"] if not cr["masked"]]:
            need("No line is crossed by the region at or above the limit.", "crossings")
    for g in comb["group_ceilings"]:
        if len(g["members"]) > 1 and g["power_scale"] is not None:
            need(f"all members' powers times {g['power_scale']:.3g}", "group ceiling")
    for name, ratio in comb["max_ratio_by_area"].items():
        if ratio is not None and math.isfinite(ratio) and tiers.get(name) != "none" and ratio < 1:
            avoid(f"{name}: OVER THE LIMIT", "an area within its limit")
    return bad
