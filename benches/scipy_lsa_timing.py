#!/usr/bin/env python3
"""Times scipy.optimize.linear_sum_assignment on the dense problem that
benches/assign.rs times: 1000 x 1000 costs uniform on [0, 1), drawn by
splitmix64 from the same seed, so both solve the identical matrix and the
optimal totals can be compared.

Reference: scipy (version printed below; written against scipy 1.17.1,
numpy 2.4.6), whose solver is Crouse's shortest augmenting path method.

Usage: python3 benches/scipy_lsa_timing.py [repeats]
"""
import sys
import time

import numpy as np
import scipy
from scipy.optimize import linear_sum_assignment

DENSE_SEED = 20260501  # same as DENSE_SEED in benches/assign.rs
N = 1000
M64 = (1 << 64) - 1


def splitmix64_uniform(seed, n):
    """i-th output (from 0) uses state seed + (i + 1) * gamma (mod 2^64),
    then the splitmix64 mix; top 53 bits scaled to [0, 1)."""
    with np.errstate(over="ignore"):
        z = np.uint64(seed) + np.arange(1, n + 1, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) * (1.0 / (1 << 53))


def splitmix64_scalar(seed, i):
    z = (seed + (i + 1) * 0x9E3779B97F4A7C15) & M64
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & M64
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & M64
    return z ^ (z >> 31)


def main():
    repeats = int(sys.argv[1]) if len(sys.argv) > 1 else 30
    cost = splitmix64_uniform(DENSE_SEED, N * N).reshape(N, N)
    # The vectorised stream must equal the plain integer definition.
    for i in (0, 1, 12345, N * N - 1):
        assert cost.flat[i] == (splitmix64_scalar(DENSE_SEED, i) >> 11) / (1 << 53)

    rows, cols = linear_sum_assignment(cost)  # warm-up
    total = cost[rows, cols].sum()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        linear_sum_assignment(cost)
        times.append(time.perf_counter() - t0)
    times.sort()
    ms = [t * 1e3 for t in times]
    print(f"scipy {scipy.__version__}, numpy {np.__version__}")
    print(f"dense {N}x{N} uniform [0,1), seed {DENSE_SEED}: optimal total {total:.12f}")
    print(f"linear_sum_assignment over {repeats} runs (wall clock): mean {sum(ms) / len(ms):.2f} ms, "
          f"min {ms[0]:.2f} ms, median {ms[len(ms) // 2]:.2f} ms, max {ms[-1]:.2f} ms")


if __name__ == "__main__":
    main()
