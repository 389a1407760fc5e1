"""The benchmark scripts still run against the current API, at toy sizes (their figures are
not checked here: performance belongs to benchmarks/README.md). Two carry physics that is
checked: the Fibonacci chain's peaks against the analytic window transform (Baake & Grimm
2013, docs/references.md), and the streaming benchmark's memory and reading targets."""

import re
import subprocess
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parent.parent / "benchmarks"

RUNS = {
    "end_to_end": ["bench_end_to_end.py", "--atoms", "1e4", "--repeats", "1"],
    "exact": ["bench_exact.py", "--quick", "--repeats", "1"],
    "geometry": ["bench_geometry.py", "--atoms", "10000", "--repeat", "1"],
    "powder": ["bench_powder.py", "--atoms", "1e4", "--r-max", "8", "--baseline-atoms", "1000",
               "--skip-single-thread"],
    "compare": ["bench_compare.py", "--cells", "4", "--points", "16"],
    "cluster": ["bench_cluster.py", "--atoms", "1e4", "--points", "2000", "--stream", "1e5"],
    "gridded": ["bench_gridded.py", "--quick", "--atoms", "1e4"],
}


def run(args, cwd) -> str:
    res = subprocess.run([sys.executable, str(BENCH / args[0]), *args[1:]], cwd=cwd, capture_output=True,
                         text=True, timeout=600)
    assert res.returncode == 0, res.stdout[-2000:] + res.stderr[-4000:]
    return res.stdout


@pytest.mark.parametrize("name", list(RUNS))
def test_benchmark_runs(name, tmp_path):
    assert run(RUNS[name], tmp_path).strip()


def test_fibonacci_benchmark_errors_stay_below_one_over_n(tmp_path):
    out = run(["bench_fibonacci.py", "--max-exp", "4", "--png", str(tmp_path / "f.png")], tmp_path)
    rows = [ln.split() for ln in out.splitlines() if re.match(r"\s*\d+\s+(exact|gridded)\s", ln)]
    assert len(rows) == 2 * 2 * 2  # N = 10³, 10⁴; two paths; 1 and 2 threads
    assert all(float(r[-1]) <= 1.0 for r in rows)  # N · max error
    assert (tmp_path / "f.png").stat().st_size > 0


def test_stream_benchmark_meets_its_targets(tmp_path):
    out = run(["bench_stream.py", "--atoms", "100000", "--dir", str(tmp_path)], tmp_path)
    assert "peak RSS < 1500 MB -> met" in out and "reading < 10 % -> met" in out
