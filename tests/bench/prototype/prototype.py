"""A plain numpy/scipy prototype of tiemark's method, the yardstick of issue 11's small-survey goal.

What it does is what tiemark does on two vector surveys in one projected CRS, written the way an
analyst would write it in numpy/scipy (vectorised where the method allows it, both cores where
scipy offers them):

1. read both layers (pyogrio, GDAL bundled in its wheel) and take each feature's area-weighted
   centroid (shapely), as tiemark does for polygons;
2. signatures: each landmark's k nearest neighbours (scipy cKDTree) in the nearest-neighbour
   walk order from the landmark, the polygon's DFT (numpy.fft), the ratios Z_j / Z_-j of the
   harmonics 1 and 2 mapped onto the unit sphere (inverse stereographic projection); k and the
   leave-out subsets by tiemark's size rule;
3. matching: every target key asks a cKDTree of the reference keys for its 3 nearest;
4. RANSAC over 2-D similarities: per round a 1-signature hypothesis (the closed-form fit of
   the two polygons, kept if their RMS misfit is within the search radius) and a 2-point
   hypothesis, the bounds a georeferenced target allows (100 m, 5 deg, 5000 ppm), Wald's SPRT
   pre-test on the 24 target landmarks nearest the first candidate, consensus on a spread
   sample of 2000 with early bail-out, two least-squares refits of a new best on its
   consensus, the four best distinct hypotheses kept, candidates first in key-distance order,
   rounds stopped by the standard sample count once the best stands out from chance;
5. guided matching: mutual nearest pairs under the transform, refitted until stable, first on
   a spread subset of 20,000 for each kept hypothesis, then on every landmark for the best;
6. significance against chance (Poisson rate at the reference's density and six mirrored
   decoys, Chernoff bound, times the hypotheses tried), the largest residual from the median
   residual (Rayleigh 99.9 %), the competing-transform margin, the final refit;
7. writes control-points.csv and transform.json (scale, rotation, translation, as tiemark's).

Not done (tiemark does them too, so the comparison favours the prototype): the CRS handling
(the two layers must share one projected CRS), input validation, the affine and polynomial
models and their tests, the accuracy statement, the GeoPackage of control points, the report
and report.html.

Usage: python prototype.py REFERENCE TARGET --out DIR [--reference-id F] [--target-id F]
"""

import argparse
import itertools
import json
import math
import os
import sys
import time

import numpy as np
import pyogrio
import shapely
from scipy.spatial import cKDTree

# tiemark's defaults (src/signatures/mod.rs, src/matching/params.rs, src/fit/*.rs).
SIZE_RULE = [(20_000, 4, 2), (50_000, 4, 1), (math.inf, 5, 0)]
HARMONICS = (1, 2)
CANDIDATES = 3
CONFIDENCE = 0.999
MAX_ROUNDS = 300_000
SCORE_SAMPLE = 2000
BAIL_OUT_BLOCK = 250
LOCAL_RING = 24
HIT_RATE_IF_RIGHT = 0.25
LO_CHANCE_FACTOR = 2.5
SPRT_ALPHA, SPRT_BETA = 0.001, 0.05
KEEP = 4
COARSE_ABOVE, COARSE_SIZE = 40_000, 20_000
DECOYS, DECOY_SUBSET = 6, 5000
FALSE_ALARM_LEVEL = 0.01
MIN_CONTROL_POINTS = 5
MAX_SHIFT, MAX_ROTATION, MAX_SCALE = 100.0, math.radians(5.0), 5000e-6
RAYLEIGH_999 = math.sqrt(-2.0 * math.log(0.001))
SEED = 20_261_201

WORKERS = -1  # scipy's cKDTree queries on every core


def read_landmarks(path, id_field):
    """Ids, centroids (n, 2) and CRS of the first layer of `path`."""
    meta, _, geometry, fields = pyogrio.raw.read(path, columns=[id_field] if id_field else None)
    shapes = shapely.from_wkb(geometry)
    xy = shapely.get_coordinates(shapely.centroid(shapes))
    if id_field:
        ids = np.asarray(fields[list(meta["fields"]).index(id_field)]).astype(str)
    else:
        ids = np.arange(1, len(xy) + 1).astype(str)
    return ids, xy, meta["crs"]


# ---------------------------------------------------------------- similarities (complex form)
# A similarity is w = a z + b with complex a (scale and rotation) and b (translation).


def fit_similarity(zt, zr):
    """Least-squares similarity mapping zt onto zr (complex, last axis = points); (a, b, rmse)."""
    ct, cr = zt.mean(-1, keepdims=True), zr.mean(-1, keepdims=True)
    dt, dr = zt - ct, zr - cr
    den = (np.abs(dt) ** 2).sum(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = (np.conj(dt) * dr).sum(-1) / den
    b = cr[..., 0] - a * ct[..., 0]
    res = a[..., None] * zt + b[..., None] - zr
    rmse = np.sqrt((np.abs(res) ** 2).mean(-1))
    return a, b, rmse


def valid(a, b):
    return np.isfinite(a) and np.isfinite(b) and abs(a) > 1e-12


def admitted(a, b, centre, slack):
    """Inside the bounds a georeferenced target's own georeferencing sets (tiemark's prior)."""
    s_shift, s_rot, s_scale = slack
    shift = abs(a * centre + b - centre)
    return (
        shift <= MAX_SHIFT + s_shift
        and abs(np.angle(a)) <= MAX_ROTATION + s_rot
        and abs(abs(a) - 1.0) <= MAX_SCALE + s_scale
    )


def hypothesis_slack(fitted, tol, centre):
    m = fitted.mean()
    r = np.abs(fitted - m).max()
    if not r > 0:
        return (0.0, 0.0, 0.0)
    ang = tol / r
    return (tol + 2.0 * ang * abs(centre - m), ang, ang)


# ---------------------------------------------------------------- signatures


def signatures(pts, tree, k, leave_out):
    """Polygons (m, k+1) of landmark indices, landmark first, and their keys (m, 6)."""
    n = len(pts)
    pool = k + leave_out
    _, idx = tree.query(pts, k=pool + 1, workers=WORKERS)
    ar = np.arange(n)
    # Drop the landmark itself (first, unless a duplicate came first).
    self_first = idx[:, 0] == ar
    nbrs = np.where(self_first[:, None], idx[:, 1:], idx[:, :-1])
    polys = []
    for omit in itertools.combinations(range(pool), leave_out):
        sub = nbrs[:, [c for c in range(pool) if c not in omit]]
        p = pts[sub]  # (n, k, 2)
        here = pts.copy()
        left = np.ones((n, k), bool)
        order = np.empty((n, k), np.intp)
        for step in range(k):
            d2 = ((p - here[:, None, :]) ** 2).sum(-1)
            d2[~left] = np.inf
            j = d2.argmin(1)  # ties: the neighbour nearer the landmark, as tiemark's walk
            order[:, step] = j
            left[ar, j] = False
            here = p[ar, j]
        polys.append(np.concatenate([ar[:, None], np.take_along_axis(sub, order, 1)], 1))
    polys = np.concatenate(polys)
    z = pts[polys] - pts[polys[:, :1]]
    spectrum = np.fft.fft(z[..., 0] + 1j * z[..., 1], axis=1)
    nv = k + 1
    keys = []
    with np.errstate(divide="ignore", invalid="ignore"):
        for j in HARMONICS:
            r = spectrum[:, j] / spectrum[:, nv - j]
            q = np.abs(r) ** 2
            key = np.stack([2 * r.real / (1 + q), 2 * r.imag / (1 + q), (q - 1) / (1 + q)], 1)
            key[np.isinf(q)] = (0.0, 0.0, 1.0)
            keys.append(key)
    keys = np.concatenate(keys, 1)
    ok = np.isfinite(keys).all(1)
    return polys[ok], keys[ok]


# ---------------------------------------------------------------- significance


def log10_tail_bound(k, n, p):
    """log10 of the Chernoff-Hoeffding bound on P(X >= k), X ~ Binomial(n, p)."""
    if n == 0 or k == 0:
        return 0.0
    q = min(k / n, 1.0)
    p = min(max(p, 1e-300), 1.0)
    if q <= p:
        return 0.0
    kl = -math.log(p) if q >= 1 else q * math.log(q / p) + (1 - q) * math.log((1 - q) / (1 - p))
    return -n * kl / math.log(10)


def poisson_chance_rate(tol, spacing):
    return 1.0 - math.exp(-math.log(2) * (tol / spacing) ** 2)


# ---------------------------------------------------------------- the match


class Match:
    def __init__(self, R, T):
        self.R, self.T = R, T
        self.zR = R[:, 0] + 1j * R[:, 1]
        self.zT = T[:, 0] + 1j * T[:, 1]
        self.rtree, self.ttree = cKDTree(R), cKDTree(T)
        lo, hi = T.min(0), T.max(0)
        self.corners = np.array([lo[0] + 1j * lo[1], hi[0] + 1j * lo[1], lo[0] + 1j * hi[1], hi[0] + 1j * hi[1]])
        self.centre = complex((lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2)

    def same(self, h1, h2, tol):
        return np.all(np.abs(h1[0] * self.corners + h1[1] - (h2[0] * self.corners + h2[1])) < tol)

    def mutual_pairs(self, a, b, tol, coverage, subset, tgt=None, ttree=None):
        """Mutual nearest pairs (target index, reference index, residual) under w = a z + b."""
        zt = self.zT if tgt is None else tgt
        ttree = self.ttree if ttree is None else ttree
        zs = zt if subset is None else zt[subset]
        ids = np.arange(len(zt)) if subset is None else subset
        w = a * zs + b
        d, r = self.rtree.query(np.stack([w.real, w.imag], 1), distance_upper_bound=coverage, workers=WORKERS)
        covered = int(np.isfinite(d).sum())
        near = d < tol
        t, r, d = ids[near], r[near], d[near]
        q = (self.zR[r] - b) / a
        _, back = ttree.query(np.stack([q.real, q.imag], 1), workers=WORKERS)
        mutual = back == t
        return t[mutual], r[mutual], d[mutual], covered

    def guided(self, a, b, tol, coverage, subset, rounds, tgt=None, ttree=None):
        zt = self.zT if tgt is None else tgt
        t, r, d, cov = self.mutual_pairs(a, b, tol, coverage, subset, tgt, ttree)
        for _ in range(rounds):
            if len(t) < 2:
                break
            a2, b2, _ = fit_similarity(zt[t], self.zR[r])
            if not valid(a2, b2):
                break
            settled = np.all(np.abs((a2 - a) * self.corners + (b2 - b)) < 1e-3 * tol)
            a, b = a2, b2
            t2, r2, d2, cov = self.mutual_pairs(a, b, tol, coverage, subset, tgt, ttree)
            unchanged = len(t2) == len(t) and np.array_equal(t2, t) and np.array_equal(r2, r)
            t, r, d = t2, r2, d2
            if unchanged or settled:
                break
        return a, b, t, r, d, cov


def ransac(m, rpolys, tpolys, cand_t, cand_r, tol, chance, rng, sample):
    """The best distinct hypotheses [(consensus, a, b)], rounds and hypotheses tried."""
    zR, zT = m.zR, m.zT
    # Every candidate's 1-signature hypothesis at once (closed form on its two polygons).
    pa, pb, prmse = fit_similarity(zT[tpolys[cand_t]], zR[rpolys[cand_r]])
    poly_ok = np.isfinite(pa) & np.isfinite(pb) & (np.abs(pa) > 1e-12) & (prmse <= tol)
    t_land, r_land = tpolys[cand_t, 0], rpolys[cand_r, 0]
    tol2 = tol * tol
    e, dl = HIT_RATE_IF_RIGHT, min(max(chance, 0.01), 0.2)
    hit_step, miss_step = math.log(e / dl), math.log((1 - e) / (1 - dl))
    accept, reject = math.log((1 - SPRT_BETA) / SPRT_ALPHA), math.log(SPRT_BETA / (1 - SPRT_ALPHA))
    zs = zT[sample]
    ns = len(sample)
    blocks = np.arange(BAIL_OUT_BLOCK, ns + 1, BAIL_OUT_BLOCK)

    def hits(a, b, z):
        w = a * z + b
        d, r = m.rtree.query(np.stack([w.real, w.imag], 1), distance_upper_bound=tol, workers=1)
        return np.isfinite(d), r

    def local_test(a, b, t0, fitted):
        _, ring = m.ttree.query(m.T[t0], k=LOCAL_RING + len(fitted))
        ring = ring[~np.isin(ring, fitted)][:LOCAL_RING]
        hit, r = hits(a, b, zT[ring])
        # A reference landmark hit a second time counts as a miss.
        first = np.zeros(len(r), bool)
        _, at = np.unique(np.where(hit, r, -1), return_index=True)
        first[at] = True
        hit &= first
        llr = np.cumsum(np.where(hit, hit_step, miss_step))
        up, down = np.nonzero(llr >= accept)[0], np.nonzero(llr <= reject)[0]
        return len(up) > 0 and (len(down) == 0 or up[0] < down[0])

    def consensus_pairs(a, b):
        hit, r = hits(a, b, zs)
        rr, first = np.unique(r[hit], return_index=True)
        return sample[hit][first], rr

    def consensus_beyond(a, b, bar):
        hit, r = hits(a, b, zs)
        counts = np.cumsum(hit)[blocks - 1]
        if np.any(counts < bar * blocks):
            return None
        return len(np.unique(r[hit]))

    best = []  # (consensus, a, b), best first
    drawn_t, drawn_r = [], []
    agreeing, best_consensus, hypotheses = 0, 0, 0
    needed, rounds = MAX_ROUNDS, 0
    ordered = min(len(cand_t), MAX_ROUNDS // 4)
    while rounds < needed and rounds < MAX_ROUNDS:
        c1 = rounds if rounds < ordered else rng.integers(len(cand_t))
        c2 = rng.integers(len(cand_t))
        rounds += 1
        t1, r1, t2, r2 = t_land[c1], r_land[c1], t_land[c2], r_land[c2]
        drawn_t.append(zT[t1])
        drawn_r.append(zR[r1])
        if best and abs(best[0][1] * zT[t1] + best[0][2] - zR[r1]) ** 2 < tol2:
            agreeing += 1
        hyps = []
        if poly_ok[c1]:
            hyps.append((pa[c1], pb[c1], tpolys[cand_t[c1]]))
        if t1 != t2 and r1 != r2:
            a = (zR[r2] - zR[r1]) / (zT[t2] - zT[t1])
            hyps.append((a, zR[r1] - a * zT[t1], np.array([t1, t2])))
        improved = False
        for a, b, fitted in hyps:
            hypotheses += 1
            if not admitted(a, b, m.centre, hypothesis_slack(zT[fitted], tol, m.centre)):
                continue
            if not local_test(a, b, t1, fitted):
                continue
            bar = max(0.5 * best_consensus / ns, 2.0 * chance)
            score = consensus_beyond(a, b, bar)
            if score is None:
                continue
            if len(best) < KEEP or score > best[-1][0]:
                for _ in range(2):
                    st, sr = consensus_pairs(a, b)
                    a2, b2, _ = fit_similarity(zT[st], zR[sr])
                    if not valid(a2, b2):
                        break
                    s2 = len(consensus_pairs(a2, b2)[0])
                    if s2 < score:
                        break
                    a, b, score = a2, b2, s2
            # Keep the best KEEP that map the target's extent to clearly different places.
            same = [i for i, h in enumerate(best) if m.same((h[1], h[2]), (a, b), 2 * tol)]
            if same and best[same[0]][0] >= score:
                pass
            else:
                if same:
                    best.pop(same[0])
                best.append((score, a, b))
                best.sort(key=lambda h: -h[0])
                del best[KEEP:]
            if score > best_consensus:
                best_consensus, improved = score, True
        if improved:
            a, b = best[0][1], best[0][2]
            agreeing = int((np.abs(a * np.array(drawn_t) + b - np.array(drawn_r)) ** 2 < tol2).sum())
        credible = best_consensus > 0 and (
            log10_tail_bound(best_consensus, ns, min(LO_CHANCE_FACTOR * chance, 0.5)) + math.log10(max(hypotheses, 1))
            < -2.0
        )
        if credible:
            w = max(agreeing, 1) / len(drawn_t)
            count = math.inf if w <= 0 else (0 if w >= 1 else math.log(1 - CONFIDENCE) / math.log(1 - w))
            needed = int(min(max(math.ceil(count), 64), MAX_ROUNDS))
        else:
            needed = MAX_ROUNDS
    return best, rounds, hypotheses


def spread(n_points, size, order):
    step = max(n_points // max(size, 1), 1)
    return order[::step]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("reference")
    ap.add_argument("target")
    ap.add_argument("--out", required=True)
    ap.add_argument("--reference-id")
    ap.add_argument("--target-id")
    args = ap.parse_args()
    times, cpu = {}, {}
    clock, cpu_clock = time.perf_counter(), time.process_time()

    def lap(name):
        # Wall and CPU seconds (all threads of the process) of each stage.
        nonlocal clock, cpu_clock
        now, cpu_now = time.perf_counter(), time.process_time()
        times[name], cpu[name] = now - clock, cpu_now - cpu_clock
        clock, cpu_clock = now, cpu_now

    rid, R, rcrs = read_landmarks(args.reference, args.reference_id)
    tid, T, tcrs = read_landmarks(args.target, args.target_id)
    if rcrs != tcrs:
        sys.exit(f"the two layers are in different CRSs ({rcrs}, {tcrs}); the prototype needs one")
    lap("read")
    m = Match(R, T)
    # A spatial order of the target (Morton order of a 1024 x 1024 grid): the spread subsets.
    lo, hi = T.min(0), T.max(0)
    cell = np.clip(((T - lo) / np.maximum(hi - lo, 1e-9) * 1023).astype(np.int64), 0, 1023)
    code = np.zeros(len(T), np.int64)
    for bit in range(10):
        code |= ((cell[:, 0] >> bit) & 1) << (2 * bit)
        code |= ((cell[:, 1] >> bit) & 1) << (2 * bit + 1)
    torder = np.argsort(code, kind="stable")
    step = max(len(R) // 10_000, 1)
    d, _ = m.rtree.query(R[::step], k=2, workers=WORKERS)
    spacing = float(np.median(d[:, 1]))
    lap("trees")
    k, leave_out = next((k, lo_) for up_to, k, lo_ in SIZE_RULE if min(len(R), len(T)) <= up_to)
    rpolys, rkeys = signatures(R, m.rtree, k, leave_out)
    tpolys, tkeys = signatures(T, m.ttree, k, leave_out)
    lap("signatures")
    kd, kr = cKDTree(rkeys).query(tkeys, k=CANDIDATES, workers=WORKERS)
    cand_t = np.repeat(np.arange(len(tkeys)), CANDIDATES)
    cand_r, cand_d = kr.ravel(), kd.ravel()
    by = np.argsort(cand_d, kind="stable")
    cand_t, cand_r = cand_t[by], cand_r[by]
    lap("matching")
    tol = 0.25 * spacing
    coverage = 3.0 * spacing
    chance = poisson_chance_rate(tol, spacing)
    rng = np.random.default_rng(SEED)
    sample = spread(len(T), SCORE_SAMPLE, torder).copy()
    rng.shuffle(sample)
    best, rounds, hypotheses = ransac(m, rpolys, tpolys, cand_t, cand_r, tol, chance, rng, sample)
    if not best:
        sys.exit("no hypothesis passed the pre-test: no consistent transform")
    lap("ransac")
    coarse = spread(len(T), COARSE_SIZE, torder) if len(T) > COARSE_ABOVE else None
    ranked = []
    for consensus, a, b in best:
        if coarse is None:
            ranked.append((consensus, a, b))
            continue
        a2, b2, t, _, _, cov = m.guided(a, b, tol, coverage, coarse, 20)
        quick = math.log10(max(hypotheses, 1)) + log10_tail_bound(len(t), cov, chance)
        if quick < math.log10(FALSE_ALARM_LEVEL):
            ranked.append((len(t), a2, b2))
    if not ranked:
        sys.exit("no hypothesis stood out from chance on the subset: no consistent transform")
    ranked.sort(key=lambda h: -h[0])
    runs = ranked[:1] if coarse is not None else ranked
    alternatives = [(h[1], h[2]) for h in ranked]
    top = None
    for i, (_, a, b) in enumerate(runs):
        g = m.guided(a, b, tol, coverage, torder, 20)
        alternatives[i] = (g[0], g[1])
        if top is None or len(g[2]) > len(top[2]):
            top = g
    a, b, t, r, d, cov = top
    # Mirrored decoys: the chance rate guided matching reaches where no similarity can align.
    sub = spread(len(T), DECOY_SUBSET, torder)
    zsub = m.zT[sub]
    c = zsub.mean()
    drng = np.random.default_rng(SEED ^ 0x5EED_DEC0)
    rate = 0.0
    for i in range(DECOYS):
        axis = math.pi * (i + drng.random()) / DECOYS
        mirrored = c + np.exp(2j * axis) * np.conj(zsub - c)
        mt = cKDTree(np.stack([mirrored.real, mirrored.imag], 1))
        g = m.guided(a, b, tol, coverage, None, 10, tgt=mirrored, ttree=mt)
        if g[5] > 0:
            rate = max(rate, len(g[2]) / g[5])
    h_total = hypotheses + len(best) + DECOYS
    log10_fa = math.log10(h_total) + log10_tail_bound(len(t), cov, min(max(chance, rate), 0.999999))
    if len(t) < MIN_CONTROL_POINTS or log10_fa >= math.log10(FALSE_ALARM_LEVEL):
        sys.exit(f"not significant: {len(t)} pairs of {cov}, log10 false alarms {log10_fa:.1f}")
    # The largest residual a control point may have: 99.9 % of the Rayleigh law from the median.
    sigma = float(np.median(d)) / math.sqrt(2 * math.log(2))
    wanted = min(max(RAYLEIGH_999 * sigma, 0.02 * tol), tol)
    max_residual = tol
    if wanted != tol:
        g2 = m.guided(a, b, wanted, coverage, torder, 10)
        if len(g2[2]) >= MIN_CONTROL_POINTS:
            a, b, t, r, d, _ = g2
            max_residual = wanted
    fa, fb, frmse = fit_similarity(m.zT[t], m.zR[r])
    # The competing transform: the best other refined hypothesis, by its support.
    support_set = coarse if coarse is not None else torder
    support = len(m.mutual_pairs(fa, fb, max_residual, coverage, support_set)[0])
    runner = None
    for a0, b0 in alternatives:
        g = m.guided(a0, b0, tol, coverage, support_set, 20)
        if m.same((g[0], g[1]), (fa, fb), 2 * tol) or not admitted(g[0], g[1], m.centre, (0, 0, 0)):
            continue
        s = len(m.mutual_pairs(g[0], g[1], max_residual, coverage, support_set)[0])
        runner = s if runner is None else max(runner, s)
    if runner is not None and not (support - runner > 3 * math.sqrt(support + runner)):
        sys.exit(f"ambiguous: support {support} against {runner}")
    lap("fit")
    os.makedirs(args.out, exist_ok=True)
    w = fa * m.zT[t] + fb
    res = m.zR[r] - w
    cols = [rid[r], tid[t], R[r, 0], R[r, 1], T[t, 0], T[t, 1], np.abs(res), res.real, res.imag]
    with open(os.path.join(args.out, "control-points.csv"), "w") as f:
        f.write("reference_id,target_id,reference_x,reference_y,target_x,target_y,residual_m,residual_dx_m,residual_dy_m\n")
        row = "{},{}" + ",{:.4f}" * 7 + "\n"
        f.writelines(row.format(*values) for values in zip(*(c.tolist() for c in cols)))
    with open(os.path.join(args.out, "transform.json"), "w") as f:
        json.dump(
            {
                "scale": abs(fa),
                "rotation_deg": math.degrees(np.angle(fa)),
                "translation_x": fb.real,
                "translation_y": fb.imag,
                "control_points": int(len(t)),
                "rmse_m": float(frmse),
                "neighbours": k,
                "leave_out": leave_out,
                "ransac_rounds": rounds,
                "hypotheses": hypotheses,
                "decoy_chance_rate": rate,
                "log10_false_alarms": log10_fa,
                "seconds": times,
                "cpu_seconds": cpu,
            },
            f,
            indent=2,
        )
    lap("write")
    print(
        f"prototype: {len(R)} + {len(T)} landmarks, k {k} leave-out {leave_out}, "
        f"{len(rkeys)} + {len(tkeys)} signatures, {rounds} RANSAC rounds, {len(t)} control points; "
        + ", ".join(f"{n} {s:.2f} s ({cpu[n]:.2f} s CPU)" for n, s in times.items())
    )


if __name__ == "__main__":
    main()
