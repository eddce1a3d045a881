"""Checks both answers against the truth and prints the times of run.sh with their ratio.

Usage: python compare.py TIMES TIEMARK_OUT PROTOTYPE_OUT

TIMES holds one line per run: `tool wall_s user_s sys_s max_rss_kb` (GNU time's %e %U %S %M).
Each output folder holds transform.json (scale, rotation_deg, translation_x, translation_y:
target -> reference, x' = s (cos t x - sin t y) + tx, ...) and control-points.csv (reference_x,
reference_y, target_x, target_y, one row per control point).

The truth is the end-to-end benchmark's (tests/bench/end_to_end.rs, `truth()`): a rotation of
0.3 deg and a scale of 1 + 800 ppm about CENTRE = (500000, 5300000) in EPSG:32633, then a shift
of (12, 9) m. A transform passes when it maps CENTRE within 5 cm of where the truth does (the
benchmark's own test); a control point is right when the truth maps its target landmark within
1 m of its reference landmark (the target's noise is 0.2 m per coordinate, so a right pair is
off by more than 1 m with probability exp(-12.5); landmarks are about 20 m apart, so a wrong
partner is rarely that close: common practice, a bound of a few sigma well below the spacing).
"""

import csv
import json
import math
import statistics
import sys

CENTRE = complex(500_000.0, 5_300_000.0)
SCALE, ROTATION, SHIFT = 1.0 + 800e-6, math.radians(0.3), complex(12.0, 9.0)


def truth(z):
    a = SCALE * complex(math.cos(ROTATION), math.sin(ROTATION))
    return CENTRE + a * (z - CENTRE) + SHIFT


def check(name, folder):
    with open(f"{folder}/transform.json") as f:
        doc = json.load(f)
    a = doc["scale"] * complex(math.cos(math.radians(doc["rotation_deg"])), math.sin(math.radians(doc["rotation_deg"])))
    b = complex(doc["translation_x"], doc["translation_y"])
    off = abs(a * CENTRE + b - truth(CENTRE))
    pairs, right = set(), 0
    with open(f"{folder}/control-points.csv") as f:
        for row in csv.DictReader(f):
            pairs.add((row["reference_id"], row["target_id"]))
            r = complex(float(row["reference_x"]), float(row["reference_y"]))
            t = complex(float(row["target_x"]), float(row["target_y"]))
            right += abs(truth(t) - r) < 1.0
    ok = off < 0.05 and len(pairs) > 0 and right >= 0.99 * len(pairs)
    print(
        f"{name}: transform {off * 100:.2f} cm off the truth at the centre; "
        f"{len(pairs)} control points, {right} right ({100 * right / max(len(pairs), 1):.2f} %): "
        + ("right" if ok else "WRONG")
    )
    return ok, pairs


def main():
    times_file, tiemark_out, prototype_out = sys.argv[1:4]
    ok_t, pairs_t = check("tiemark", tiemark_out)
    ok_p, pairs_p = check("prototype", prototype_out)
    both = len(pairs_t & pairs_p)
    print(f"control points in both answers: {both} ({100 * both / max(len(pairs_t), 1):.1f} % of tiemark's)")
    runs = {}
    for line in open(times_file):
        tool, wall, user, sys_, rss = line.split()
        runs.setdefault(tool, []).append((float(wall), float(user) + float(sys_), float(user), float(sys_), int(rss) / 1000))
    med = {}
    for tool, rs in runs.items():
        walls = " ".join(f"{r[0]:.2f}" for r in rs)
        cpus = " ".join(f"{r[1]:.2f}" for r in rs)
        med[tool] = (statistics.median(r[0] for r in rs), statistics.median(r[1] for r in rs))
        print(
            f"{tool}: wall {walls} s (median {med[tool][0]:.2f}), CPU user+sys {cpus} s "
            f"(median {med[tool][1]:.2f}), peak RSS {max(r[4] for r in rs):.0f} MB"
        )
    if "tiemark" in med and "prototype" in med:
        print(
            f"ratio prototype / tiemark (medians): wall {med['prototype'][0] / med['tiemark'][0]:.1f}x, "
            f"CPU {med['prototype'][1] / med['tiemark'][1]:.1f}x (goal of issue 11: at least 30x)"
        )
    sys.exit(0 if ok_t and ok_p else 1)


if __name__ == "__main__":
    main()
