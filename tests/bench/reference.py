#!/usr/bin/python3
"""Reference timing for the statistics benchmark: what a researcher would run on an export, with scipy.

Invoked by tests/bench/stats.ts (one process per item and size, so sizes do not share memory):
    /usr/bin/python3 tests/bench/reference.py --dir bench-results/data --item continuous --n 1000000 --reps 3

Reads the first n values of bench-results/data/<item>-a.f64 and <item>-b.f64 (Float64 little-endian,
invented data written by tests/bench/data.ts), so scipy sees exactly the numbers the service sees. For the
integer 0-100 item these are the raw answers (the expanded data a researcher would hold), not counts.

Timed with the data already in memory, per repetition:
    scipy.stats.ttest_ind(a, b, equal_var=False)                       Welch t-test
    scipy.stats.mannwhitneyu(a, b, alternative='two-sided',
                             use_continuity=True, method='asymptotic')  rank-sum, normal approximation
    scipy.stats.shapiro(a[:5000]) and shapiro(b[:5000])                 Shapiro-Wilk on a subsample of 5,000
Prints one JSON object on stdout: seconds per step and per repetition, the statistics (for a cross-check
against the service), versions, and the process's peak resident memory (VmHWM).
Requires Debian's python3-scipy (apt-get install python3-scipy).
"""
import argparse
import json
import math
import platform
import sys
import time

import numpy as np
import scipy
from scipy import stats

SHAPIRO_SUBSAMPLE = 5000


def peak_rss_kb():
    try:
        with open('/proc/self/status') as f:
            for line in f:
                if line.startswith('VmHWM:'):
                    return int(line.split()[1])
    except OSError:
        pass
    import resource
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def load(directory, item, group, n):
    x = np.fromfile(f'{directory}/{item}-{group}.f64', dtype='<f8', count=n)
    if x.shape[0] != n:
        raise SystemExit(f'{directory}/{item}-{group}.f64 holds {x.shape[0]} values; {n} needed')
    return x


def run_once(a, b):
    t0 = time.perf_counter()
    tt = stats.ttest_ind(a, b, equal_var=False)
    t1 = time.perf_counter()
    mw = stats.mannwhitneyu(a, b, alternative='two-sided', use_continuity=True, method='asymptotic')
    t2 = time.perf_counter()
    sa = stats.shapiro(a[:SHAPIRO_SUBSAMPLE])
    sb = stats.shapiro(b[:SHAPIRO_SUBSAMPLE])
    t3 = time.perf_counter()
    values = {
        'welchT': float(tt.statistic), 'welchP': float(tt.pvalue),
        'u': float(mw.statistic), 'mannWhitneyP': float(mw.pvalue),
        'shapiroWA': float(sa.statistic), 'shapiroWB': float(sb.statistic),
    }
    return {'ttest': t1 - t0, 'mannwhitneyu': t2 - t1, 'shapiro': t3 - t2, 'total': t3 - t0}, values


def main():
    p = argparse.ArgumentParser()
    p.add_argument('--dir', required=True)
    p.add_argument('--item', choices=['continuous', 'integer'], required=True)
    p.add_argument('--n', type=int, required=True)
    p.add_argument('--reps', type=int, default=3)
    args = p.parse_args()

    a = load(args.dir, args.item, 'a', args.n)
    b = load(args.dir, args.item, 'b', args.n)
    # Warm-up on a small prefix so that lazy imports inside scipy are not timed.
    run_once(a[:1000], b[:1000])
    rss_before_kb = peak_rss_kb()

    seconds = {'ttest': [], 'mannwhitneyu': [], 'shapiro': [], 'total': []}
    values = None
    for r in range(args.reps):
        t, values = run_once(a, b)
        for k in seconds:
            seconds[k].append(t[k])
        print(f'    scipy {args.item} n={args.n}: rep {r + 1}/{args.reps} {t["total"] * 1000:.1f} ms', file=sys.stderr)

    out = {
        'tool': 'scipy',
        'versions': {'python': platform.python_version(), 'numpy': np.__version__, 'scipy': scipy.__version__},
        'item': args.item,
        'n': args.n,
        'reps': args.reps,
        'seconds': seconds,
        'values': {k: (v if math.isfinite(v) else None) for k, v in values.items()},
        'peakRssKbBeforeTiming': rss_before_kb,
        'peakRssKb': peak_rss_kb(),
    }
    json.dump(out, sys.stdout)
    sys.stdout.write('\n')


if __name__ == '__main__':
    main()
