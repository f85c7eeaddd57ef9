#!/usr/bin/env python3
"""gco's alpha-expansion (PyPI gco-wrapper) on the energy written by the smooth_vs_gco example;
prints its time and energy, and the ratios against grove's line given on the command line.

Usage: smooth_vs_gco.py ENERGY.bin RUNS
"""

import statistics
import sys
import time

import gco
import numpy as np

FORWARD = [(1, 0), (0, 1), (1, 1), (-1, 1)]


def load(path):
    raw = np.fromfile(path, dtype="<i4")
    w, h, n_labels, _conn = (int(v) for v in raw[:4])
    n = w * h
    unary = raw[4 : 4 + n * n_labels].reshape(n, n_labels)
    weights = raw[4 + n * n_labels : 4 + n * n_labels + n * 4].reshape(h, w, 4)
    idx = np.arange(n).reshape(h, w)
    s1, s2, wt = [], [], []
    for k, (dx, dy) in enumerate(FORWARD):
        ys = slice(0, h - dy)
        xs = slice(max(0, -dx), w - max(0, dx))
        a = idx[ys, xs]
        b = idx[dy:, :][: a.shape[0]][:, xs.start + dx : xs.stop + dx]
        ww = weights[ys, xs, k]
        keep = ww != 0
        s1.append(a[keep]); s2.append(b[keep]); wt.append(ww[keep])
    s1, s2, wt = (np.concatenate(v).astype(np.int32) for v in (s1, s2, wt))
    return w, h, n_labels, unary.astype(np.int32), s1, s2, wt


def run(n_labels, unary, s1, s2, wt):
    g = gco.GCO()
    g.create_general_graph(unary.shape[0], n_labels, False)
    g.set_data_cost(unary)
    g.set_all_neighbors(s1, s2, wt)
    g.set_smooth_cost((1 - np.eye(n_labels)).astype(np.int32))
    t, c = time.perf_counter(), time.process_time()
    g.expansion(-1)
    wall, cpu = time.perf_counter() - t, time.process_time() - c
    energy = int(g.compute_energy())
    g.destroy_graph()
    return wall, cpu, energy


def main():
    path, runs = sys.argv[1], int(sys.argv[2])
    w, h, n_labels, unary, s1, s2, wt = load(path)
    results = [run(n_labels, unary, s1, s2, wt) for _ in range(runs)]
    wall = statistics.median(r[0] for r in results)
    cpu = statistics.median(r[1] for r in results)
    energy = results[-1][2]
    mp = w * h / 1e6
    print(f"gco expansion:   wall {wall:.3f} s, cpu {cpu:.3f} s (median of {runs}; {cpu / mp:.3f} cpu s/MP), energy {energy}")


if __name__ == "__main__":
    main()
