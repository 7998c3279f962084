"""Sweep speed-ups: one worker against two, chunked continuation against independent cold solves."""

from __future__ import annotations

import time

import numpy as np

import bvpkit


def _pellet() -> bvpkit.Problem:
    return bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                          independent="r", constants={"phi": 1.0, "Bi": 10.0},
                          outputs={"effectiveness": "3*c'(1)/phi**2"})


def pellet_sweep() -> str:
    grid = {"phi": np.geomspace(0.1, 100, 150), "Bi": [1.0, 3.0, 10.0, 30.0]}
    p = _pellet()
    times = {}
    tables = {}
    for workers in (1, 2, 1, 2):  # alternating; the second of each pair is reported
        start = time.perf_counter()
        result = bvpkit.sweep(p, grid, workers=workers, tol=1e-8)
        times[workers] = time.perf_counter() - start
        tables[workers] = [r["effectiveness"] for r in result.table]
    same = tables[1] == tables[2]
    chunked = bvpkit.sweep(p, grid, executor="serial", tol=1e-8)
    cold = bvpkit.sweep(p, grid, executor="serial", tol=1e-8, chunk=1)
    it_chunked = np.mean([r["iterations"] for r in chunked.table])
    it_cold = np.mean([r["iterations"] for r in cold.table])
    return "\n".join([
        f"### Pellet design chart sweep, {len(chunked.table)} points, tol = 1e-8",
        "",
        "| run | time (s) | ratio |",
        "| --- | --- | --- |",
        f"| process pool, 1 worker | {times[1]:.2f} | 1.00 |",
        f"| process pool, 2 workers | {times[2]:.2f} | {times[1] / times[2]:.2f}x faster |",
        f"| serial, chunks of 25 seeded by their neighbour | {chunked.seconds:.2f} | mean {it_chunked:.2f} Newton iterations per point |",
        f"| serial, every point a cold solve (chunk = 1) | {cold.seconds:.2f} | mean {it_cold:.2f} Newton iterations per point ({it_cold / it_chunked:.2f}x more) |",
        "",
        f"The two pools give {'identical' if same else 'DIFFERENT'} tables.",
        "",
    ])


SECTIONS = [pellet_sweep]
