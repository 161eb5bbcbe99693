#!/usr/bin/env python3
"""Reference pipeline for the topostate benchmark (not part of the tests).

The steps of `topostate ingest`, written the way a NumPy / SciPy /
scikit-learn user would vectorise them, run on the same generated cohort, so
the harness (scripts/bench, flag -reference) can compare throughput and state
recovery:

  1. read every series (numpy.loadtxt), centre and scale each region;
  2. sliding-window Pearson correlations (window w, step s) as one batched
     matrix product per series, upper triangle as float32;
  3. variance-peak windows (local maxima of the window variance), at most a fair share
     per series (2 * fit_windows / series, uniform), then a uniform cap;
  4. k-means (scikit-learn, k-means++, n_init restarts, max_iter) for
     k = kmin..kmax; the elbow by the largest distance from the chord of the
     normalised W(k) curve;
  5. per series again: windows, nearest centroid (KMeans.predict), fractional
     occupancy, dwell runs, transition counts, each state's mean network, its
     maximum spanning tree (scipy.sparse.csgraph on 2 - r), the Betti-0 and
     Betti-1 event values and curves on the threshold grid;
  6. results saved with numpy.savez (a stand-in for the warehouse write: the
     duckdb Python module is not available from Debian packages);
  7. the adjusted Rand index of the window states against truth.tsv (the
     latent state held by most of a window's time points).

Prints one JSON object on standard output. Needs python3-numpy,
python3-scipy and python3-sklearn.
"""

import argparse
import json
import math
import os
import re
import sys
import tempfile
import time

import numpy as np
import scipy
import sklearn
from scipy.sparse.csgraph import minimum_spanning_tree
from sklearn.cluster import KMeans
from sklearn.metrics import adjusted_rand_score

SERIES = re.compile(r"^(sub-[A-Za-z0-9]+)(?:_(ses-[A-Za-z0-9]+))?(?:_[A-Za-z0-9]+-[A-Za-z0-9]+)*_timeseries\.tsv$")


def find_series(root):
    out = []
    for d, _, files in os.walk(root):
        for f in files:
            m = SERIES.match(f)
            if m:
                out.append((m.group(1), os.path.join(d, f)))
    out.sort(key=lambda x: x[1])
    return out


def read_series(path):
    return np.loadtxt(path, delimiter="\t", skiprows=1, dtype=np.float64, ndmin=2)


def windows(y, w, s, iu):
    """Window correlations, rows = windows, columns = pairs i < j (row-major)."""
    y = y - y.mean(axis=0)
    y = y / np.abs(y).max(axis=0)
    x = np.lib.stride_tricks.sliding_window_view(y, w, axis=0)[::s]  # (W, p, w)
    xc = x - x.mean(axis=2, keepdims=True)
    c = np.matmul(xc, xc.transpose(0, 2, 1))  # (W, p, p)
    d = 1.0 / np.sqrt(np.einsum("kii->ki", c))
    r = c * d[:, :, None] * d[:, None, :]
    np.clip(r, -1.0, 1.0, out=r)
    return r[:, iu[0], iu[1]].astype(np.float32)


def local_maxima(v):
    left = np.empty(len(v), dtype=bool)
    right = np.empty(len(v), dtype=bool)
    left[0], right[-1] = True, True
    left[1:] = v[1:] > v[:-1]
    right[:-1] = v[:-1] >= v[1:]
    return np.flatnonzero(left & right)


def chord_elbow(ks, ws):
    ks, ws = np.asarray(ks, float), np.asarray(ws, float)
    if len(ks) < 3 or ws.max() == ws.min():
        return int(ks[0])
    x = (ks - ks.min()) / (ks.max() - ks.min())
    y = (ws - ws.min()) / (ws.max() - ws.min())
    dx, dy = x[-1] - x[0], y[-1] - y[0]
    dist = np.abs(dy * (x - x[0]) - dx * (y - y[0])) / math.hypot(dx, dy)
    return int(ks[int(np.argmax(dist))])


def dynamics(labels, k):
    occ = np.bincount(labels, minlength=k) / len(labels)
    change = np.flatnonzero(np.diff(labels)) + 1
    starts = np.concatenate(([0], change))
    lengths = np.diff(np.concatenate((starts, [len(labels)])))
    run_state = labels[starts]
    dwell = np.array([lengths[run_state == j].mean() if np.any(run_state == j) else np.nan for j in range(k)])
    trans = np.zeros((k, k), dtype=np.int64)
    np.add.at(trans, (labels[:-1], labels[1:]), 1)
    return occ, dwell, trans


def filtration(p, upper, iu, grid):
    m = np.zeros((p, p))
    m[iu] = 2.0 - upper  # positive weights; the minimum tree of 2 - r is the maximum tree of r
    tree = minimum_spanning_tree(m).tocoo()
    b0 = np.sort(2.0 - tree.data)
    is_tree = np.zeros((p, p), dtype=bool)
    i, j = np.minimum(tree.row, tree.col), np.maximum(tree.row, tree.col)
    is_tree[i, j] = True
    b1 = np.sort(upper[~is_tree[iu]])
    beta0 = p - (len(b0) - np.searchsorted(b0, grid, side="right"))
    beta1 = len(b1) - np.searchsorted(b1, grid, side="right")
    return b0, b1, beta0, beta1


def window_truth(states, w, s, nwin):
    out = np.empty(nwin, dtype=np.int64)
    top = states.max() + 1
    for i in range(nwin):
        seg = states[i * s : i * s + w]
        count = np.bincount(seg, minlength=top)
        best = seg[(w - 1) // 2]
        for st in range(top):
            if count[st] > count[best]:
                best = st
        out[i] = best
    return out


def read_truth(path):
    truth = {}
    with open(path) as f:
        next(f)
        for line in f:
            sub, _, st = line.rstrip("\n").split("\t")
            truth.setdefault(sub, []).append(int(st))
    return {k: np.asarray(v) for k, v in truth.items()}


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--input", required=True)
    ap.add_argument("--window", type=int, default=50)
    ap.add_argument("--step", type=int, default=1)
    ap.add_argument("--fit-windows", type=int, default=20000)
    ap.add_argument("--states-min", type=int, default=2)
    ap.add_argument("--states-max", type=int, default=10)
    ap.add_argument("--restarts", type=int, default=5)
    ap.add_argument("--max-iter", type=int, default=150)
    ap.add_argument("--algorithm", default="lloyd", help="scikit-learn KMeans algorithm: lloyd or elkan")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--grid", default="-1:1:101")
    a = ap.parse_args()

    lo, hi, n = a.grid.split(":")
    grid = np.linspace(float(lo), float(hi), int(n))
    series = find_series(a.input)
    nser = len(series)
    phases = {}
    t_all = time.perf_counter()

    # 1-3: read, windows, variance peaks.
    t = time.perf_counter()
    share = max(1, (2 * a.fit_windows + nser - 1) // nser)
    pool, p, total = [], None, 0
    for idx, (_, path) in enumerate(series):
        y = read_series(path)
        if p is None:
            p = y.shape[1]
            iu = np.triu_indices(p, 1)
        r = windows(y, a.window, a.step, iu)
        total += len(r)
        ex = local_maxima(r.var(axis=1))
        if len(ex) > share:
            rng = np.random.default_rng([a.seed, idx + 1])
            ex = np.sort(rng.choice(ex, share, replace=False))
        pool.append(r[ex])
    x = np.concatenate(pool)
    del pool
    if len(x) > a.fit_windows:
        rng = np.random.default_rng([a.seed, 0])
        x = x[np.sort(rng.choice(len(x), a.fit_windows, replace=False))]
    phases["sample windows"] = time.perf_counter() - t

    # 4: k-means and the elbow.
    t = time.perf_counter()
    ks, ws, fits, iters = [], [], {}, {}
    for k in range(a.states_min, a.states_max + 1):
        km = KMeans(n_clusters=k, init="k-means++", n_init=a.restarts, max_iter=a.max_iter,
                    algorithm=a.algorithm, random_state=a.seed).fit(x)
        ks.append(k)
        ws.append(float(km.inertia_))
        fits[k] = km
        iters[k] = int(km.n_iter_)
    k = chord_elbow(ks, ws)
    km = fits[k]
    phases["fit states"] = time.perf_counter() - t
    del x

    # 5: per series.
    t = time.perf_counter()
    results, states_all, truth_all = [], [], []
    truth = read_truth(os.path.join(a.input, "truth.tsv")) if os.path.exists(os.path.join(a.input, "truth.tsv")) else None
    for sub, path in series:
        r = windows(read_series(path), a.window, a.step, iu)
        labels = km.predict(r)
        occ, dwell, trans = dynamics(labels, k)
        nets = []
        for st in range(k):
            rows = labels == st
            if not rows.any():
                nets.append(None)
                continue
            mean = r[rows].astype(np.float64).mean(axis=0)
            nets.append(filtration(p, mean, iu, grid))
        results.append((sub, labels, occ, dwell, trans, nets))
        if truth is not None:
            states_all.append(labels)
            truth_all.append(window_truth(truth[sub] - 1, a.window, a.step, len(labels)))
    phases["subjects"] = time.perf_counter() - t

    # 6: save.
    t = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        for sub, labels, occ, dwell, trans, nets in results:
            arrays = {"labels": labels, "occ": occ, "dwell": dwell, "trans": trans}
            for st, net in enumerate(nets):
                if net is not None:
                    arrays[f"b0_{st}"], arrays[f"b1_{st}"], arrays[f"beta0_{st}"], arrays[f"beta1_{st}"] = net
            np.savez(os.path.join(tmp, sub + ".npz"), **arrays)
    phases["write"] = time.perf_counter() - t
    wall = time.perf_counter() - t_all

    out = {
        "pipeline": "numpy/scipy/scikit-learn reference (scripts/bench/reference.py)",
        "versions": {"python": sys.version.split()[0], "numpy": np.__version__, "scipy": scipy.__version__, "sklearn": sklearn.__version__},
        "algorithm": a.algorithm,
        "series": nser, "regions": p, "windows": total, "states": k,
        "elbow": dict(zip([str(v) for v in ks], ws)), "iterations_best_restart": iters,
        "phases": phases, "wall_seconds": wall,
        "windows_per_second": total / wall,
        "windows_per_second_without_write": total / (wall - phases["write"]),
    }
    if truth is not None:
        out["ari_vs_truth"] = float(adjusted_rand_score(np.concatenate(truth_all), np.concatenate(states_all)))
    try:
        from threadpoolctl import threadpool_info
        out["threadpools"] = [{k: v for k, v in d.items() if k in ("internal_api", "num_threads", "version")} for d in threadpool_info()]
    except ImportError:
        pass
    json.dump(out, sys.stdout, indent=2)
    print()


if __name__ == "__main__":
    main()
