"""Scale: the DuckDB reduction of a large Parquet file, and the memory of a 10M-row sweep.

``bench_reduction`` writes an invented validation log (score, 0/1 label at
about 2 % events, a site) as Parquet, chunk by chunk with pyarrow so the
rows are never all in memory, into a private temporary directory; reduces it
with :func:`core.reduce.reduce_file` in a child process (scores coarsened to
``decimals`` decimals, the site as a group, DuckDB at 1GB and 2 threads);
and reads the child's peak resident memory (``VmHWM`` of its own address
space; Linux carries ``ru_maxrss`` over from the forking parent through
``exec``, so after a large earlier section it would report the parent's
size, not the reduction's; ``ru_maxrss`` is kept beside it). The file is
deleted afterwards. It times the default call (checks, counts, and the exact
second pass that measures the rounding) and the call without the rounding
pass. Goal (issue 10): the 50M-row reduction with rounded scores peaks
under 2 GB.

``bench_sweep_memory`` measures the extra memory a 10M-row sweep allocates
beyond its input arrays with :mod:`tracemalloc` (NumPy reports its buffers
to it), for unweighted and weighted scores. Goal (issue 10): the peak extra
memory stays under 4x the input arrays.

    python benchmarks/bench_reduce.py [n_rows_reduction] [n_rows_sweep]
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
import tempfile
import textwrap
import time
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

REDUCTION_GOAL_BYTES = 2 * 2**30
SWEEP_MEMORY_GOAL = 4.0

_CHILD = textwrap.dedent("""
    import json, resource, sys, time
    sys.path.insert(0, sys.argv[1])
    from core.reduce import reduce_file, reduction_of

    def hwm():  # peak resident memory of this address space (bytes)
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024

    path, decimals, check = sys.argv[2], int(sys.argv[3]), sys.argv[4] == "1"
    base = hwm()
    t0 = time.perf_counter()
    ds = reduce_file(path, score="score", label="label", positive=1, groups=("site",),
                     decimals=decimals, check_rounding=check, memory_limit="1GB", threads=2)
    seconds = time.perf_counter() - t0
    red = reduction_of(ds)
    print(json.dumps({
        "seconds": seconds, "rows": red.rows_read, "table_rows": red.table_rows,
        "peak_bytes": hwm(),
        "ru_maxrss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
        "baseline_bytes": base,
        "rounding": None if red.rounding is None else red.rounding.statement()}))
""")


def write_log(path: Path, n_rows: int, chunk: int = 1_000_000, seed: int = 0) -> None:
    """An invented validation log written chunk by chunk (never all rows in memory)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    schema = pa.schema([("score", pa.float64()), ("label", pa.int8()), ("site", pa.string())])
    sites = np.array(["north", "south", "east"])
    with pq.ParquetWriter(path, schema) as writer:
        done = 0
        while done < n_rows:
            k = min(chunk, n_rows - done)
            y = rng.random(k) < 0.02
            s = 1.0 / (1.0 + np.exp(-rng.normal(1.0 * y, 1.0)))
            writer.write_table(pa.table({"score": s, "label": y.astype(np.int8),
                                         "site": sites[rng.integers(0, 3, k)]}, schema=schema))
            done += k


def _child(path: Path, decimals: int, check: bool) -> dict:
    out = subprocess.run([sys.executable, "-c", _CHILD, str(ROOT), str(path), str(decimals),
                          "1" if check else "0"], capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def bench_reduction(n_rows: int = 50_000_000, decimals: int = 4) -> dict:
    """Rows per second and peak memory of the reduction of an ``n_rows`` Parquet file."""
    tmp = Path(tempfile.mkdtemp(prefix="fulcrum-bench-"))
    try:
        path = tmp / "log.parquet"
        t0 = time.perf_counter()
        write_log(path, n_rows)
        gen_s = time.perf_counter() - t0
        size = path.stat().st_size
        full = _child(path, decimals, check=True)
        counts_only = _child(path, decimals, check=False)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    peak = max(full["peak_bytes"], counts_only["peak_bytes"])
    return {
        "name": f"DuckDB reduction {n_rows / 1e6:g}M-row Parquet, {decimals} decimals, by site",
        "fulcrum_s": full["seconds"],
        "rows_per_s": n_rows / full["seconds"],
        "peak_mb": full["peak_bytes"] / 2**20,
        "without_rounding_check_s": counts_only["seconds"],
        "without_rounding_check_rows_per_s": n_rows / counts_only["seconds"],
        "without_rounding_check_peak_mb": counts_only["peak_bytes"] / 2**20,
        "interpreter_and_imports_mb": full["baseline_bytes"] / 2**20,
        "ru_maxrss_mb": full["ru_maxrss_bytes"] / 2**20,
        "table_rows": full["table_rows"],
        "file_mb": size / 2**20,
        "generate_s": gen_s,
        "rounding": full["rounding"],
        "note": "peak = VmHWM of the reducing child (interpreter and imports included); "
                "default call = checks + counts + exact rounding pass",
        "goal": "< 2 GB peak",
        "met": bool(peak < REDUCTION_GOAL_BYTES),
    }


def _sweep_peak(y, s, w) -> tuple[float, int]:
    from core.curve import sweep

    inputs = y.nbytes + s.nbytes + (0 if w is None else w.nbytes)
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        t0 = time.perf_counter()
        c = sweep(y, s, w)
        seconds = time.perf_counter() - t0
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    del c
    return peak / inputs, inputs, seconds


def bench_sweep_memory(n_rows: int = 10_000_000) -> dict:
    """Peak extra memory of a ``n_rows`` sweep (continuous scores), against its input arrays."""
    rng = np.random.default_rng(0)
    y = rng.random(n_rows) < 0.02
    s = rng.normal(loc=1.0 * y, scale=1.0)
    w = rng.uniform(0.5, 2.0, n_rows)
    ratio_u, in_u, t_u = _sweep_peak(y, s, None)
    ratio_w, in_w, t_w = _sweep_peak(y, s, w)
    return {
        "name": f"sweep {n_rows / 1e6:g}M continuous: peak extra memory / input arrays",
        "fulcrum_s": t_u,
        "ratio": ratio_u,
        "input_mb": in_u / 2**20,
        "peak_extra_mb": ratio_u * in_u / 2**20,
        "weighted_ratio": ratio_w,
        "weighted_input_mb": in_w / 2**20,
        "weighted_peak_extra_mb": ratio_w * in_w / 2**20,
        "weighted_s": t_w,
        "note": "tracemalloc peak during sweep() (the Curve included) over the bytes of "
                "y_true + y_score (+ weights); ratio = unweighted, weighted_ratio = weighted",
        "goal": f"< {SWEEP_MEMORY_GOAL:g}x input",
        "met": bool(ratio_u < SWEEP_MEMORY_GOAL and ratio_w < SWEEP_MEMORY_GOAL),
    }


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    n_red = int(float(argv[0])) if argv else 50_000_000
    n_sweep = int(float(argv[1])) if len(argv) > 1 else 10_000_000
    rows = [bench_reduction(n_red), bench_sweep_memory(n_sweep)]
    for r in rows:
        print(json.dumps(r, indent=2))
    return 0 if all(r["met"] for r in rows) else 1


if __name__ == "__main__":
    raise SystemExit(main())
