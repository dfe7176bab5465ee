#!/usr/bin/env python3
"""Side-by-side timing of reweave's solver and a general-purpose algebraic multigrid (PyAMG's
smoothed aggregation) on the same masked 5-point system, to the same relative residual.

Not part of CI. Needs: pip install pyamg scipy numpy pillow; a release build of reweave.

    scripts/amg-compare.py --size 2048 --case frame --case blob

For each case, reweave's `bench` generates the mask and a smooth gray image (seeded), times its
own setup + solve, and saves both; this script then assembles the same system (unknowns = masked
pixels; deg(p)·u_p − Σ u_q = Σ known neighbours, neighbours outside the image left out), and
times PyAMG's setup and solve to ‖b − Au‖/‖b‖ ≤ 1e-6.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import pyamg
import scipy.sparse as sp
from PIL import Image


def assemble(mask, img):
    h, w = mask.shape
    idx = -np.ones((h, w), dtype=np.int64)
    n = int(mask.sum())
    idx[mask] = np.arange(n)
    rows, cols, vals = [], [], []
    deg = np.zeros((h, w))
    b = np.zeros(n)
    for dy, dx in ((0, 1), (0, -1), (1, 0), (-1, 0)):
        # Pixels p whose neighbour q = p + (dy, dx) is inside the image.
        ys = slice(max(0, -dy), h - max(0, dy))
        xs = slice(max(0, -dx), w - max(0, dx))
        qy = slice(max(0, dy), h - max(0, -dy))
        qx = slice(max(0, dx), w - max(0, -dx))
        p_mask = mask[ys, xs]
        q_mask = mask[qy, qx]
        deg[ys, xs] += 1
        both = p_mask & q_mask
        rows.append(idx[ys, xs][both])
        cols.append(idx[qy, qx][both])
        vals.append(-np.ones(int(both.sum())))
        known = p_mask & ~q_mask
        np.add.at(b, idx[ys, xs][known], img[qy, qx][known])
    rows.append(np.arange(n))
    cols.append(np.arange(n))
    vals.append(deg[mask])
    a = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    return a, b


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--size", type=int, default=2048)
    ap.add_argument("--case", action="append", default=None)
    ap.add_argument("--reweave", default=os.path.join(os.path.dirname(__file__), "..", "target", "release", "reweave"))
    args = ap.parse_args()
    cases = args.case or ["frame", "blob"]
    with tempfile.TemporaryDirectory() as tmp:
        for case in cases:
            out = subprocess.run(
                [args.reweave, "bench", "--size", str(args.size), "--case", case, "--save-case", tmp],
                check=True, capture_output=True, text=True,
            ).stdout
            ours = json.loads(out.strip().splitlines()[-1])
            mask = np.array(Image.open(os.path.join(tmp, f"{case}-{args.size}-mask.png"))) >= 128
            img = np.array(Image.open(os.path.join(tmp, f"{case}-{args.size}.tif")), dtype=np.float64)
            a, b = assemble(mask, img)
            t0 = time.perf_counter()
            ml = pyamg.smoothed_aggregation_solver(a, symmetry="symmetric")
            t1 = time.perf_counter()
            residuals = []
            x = ml.solve(b, tol=1e-6, maxiter=500, accel="cg", residuals=residuals)
            t2 = time.perf_counter()
            rel = np.linalg.norm(b - a @ x) / np.linalg.norm(b)
            theirs = t2 - t0
            print(json.dumps({
                "case": case, "size": args.size, "unknowns": int(mask.sum()),
                "reweave_s": ours["total_s"], "reweave_residual": ours["residual"],
                "pyamg_setup_s": round(t1 - t0, 3), "pyamg_solve_s": round(t2 - t1, 3),
                "pyamg_total_s": round(theirs, 3), "pyamg_residual": float(rel),
                "speedup": round(theirs / ours["total_s"], 2),
            }))
            sys.stdout.flush()


if __name__ == "__main__":
    main()
