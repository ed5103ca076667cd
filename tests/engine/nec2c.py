"""Run a deck through Debian's nec2c (an independent NEC-2 translation) and parse its output."""

import re
import subprocess
from pathlib import Path

import numpy as np

_NUM = r"[-+]?\d+\.\d+E[-+]\d+"


def run(deck: str, workdir: Path, nec2c: str) -> str:
    src, out = workdir / "deck.nec", workdir / "deck.out"
    src.write_text(deck)
    subprocess.run([nec2c, f"-i{src}", f"-o{out}"], check=True, capture_output=True, timeout=300)
    return out.read_text()


def feed_impedance(output: str) -> complex:
    block = output.split("ANTENNA INPUT PARAMETERS", 1)[1].splitlines()[3]
    vals = [float(v) for v in re.findall(_NUM, block)]
    return complex(vals[4], vals[5])


def near_fields(output: str, title: str) -> tuple[np.ndarray, np.ndarray]:
    """Points (N, 3) and peak complex field (N, 3) of the first NEAR ELECTRIC/MAGNETIC table."""
    body = output.split(title, 1)[1].splitlines()
    pts, vals = [], []
    for line in body:
        try:
            x, y, z, m1, p1, m2, p2, m3, p3 = map(float, line.split())
        except ValueError:
            if pts:
                break
            continue
        pts.append((x, y, z))
        vals.append([m * np.exp(1j * np.radians(p)) for m, p in ((m1, p1), (m2, p2), (m3, p3))])
    return np.array(pts), np.array(vals)
