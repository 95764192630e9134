"""Every benchmark in one table: our time, the reference's time on the same problem, the ratio.

Each benchmark script of this folder listed in BENCHMARKS is run as its own process with
``--json``; it prints one JSON list of rows

    {"benchmark": str, "ours_seconds": float, "reference": str, "reference_seconds": float,
     "agreement": float, "target": str}

(agreement: the largest difference of the compared observable; target: what the row must meet,
e.g. "ratio >= 300 at <= 1e-6") and this script prints them as one table.  Timings are wall
times on the machine it runs on; run it on an otherwise idle machine.

Run:  python benchmarks/run_all.py
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
#: the benchmark scripts, in the order they are run
BENCHMARKS = ("golden_rule_speed.py", "exact_vs_qutip.py", "exact_large_3d.py")


def benchmark_rows(script: str) -> list[dict]:
    """Run one benchmark script with --json and return its rows (one error row if it fails).

    Parameters
    ----------
    script : str
        File name of a script in this folder.

    Returns
    -------
    list of dict
        The rows it printed (module docstring), or one row whose "reference" holds the error.
    """
    done = subprocess.run([sys.executable, str(HERE / script), "--json"], capture_output=True,
                          text=True)
    if done.returncode != 0:
        tail = (done.stderr.strip().splitlines() or ["no output"])[-1]
        return [{"benchmark": script, "reference": f"failed: {tail}"}]
    return json.loads(done.stdout.strip().splitlines()[-1])


def _cell(value, fmt: str) -> str:
    """A number formatted, or "-" when absent."""
    return "-" if value is None else format(value, fmt)


def table(rows: list[dict]) -> str:
    """The rows as a fixed-width text table (ratio = reference time / our time).

    Parameters
    ----------
    rows : list of dict
        Benchmark rows (module docstring).

    Returns
    -------
    str
        One header line and one line per row.
    """
    lines = [f"{'benchmark':<44}{'ours [s]':>10}{'reference [s]':>15}{'ratio':>9}"
             f"{'agreement':>11}  reference / target"]
    for row in rows:
        ours, ref = row.get("ours_seconds"), row.get("reference_seconds")
        ratio = ref / ours if ours and ref else None
        lines.append(f"{row['benchmark']:<44}{_cell(ours, '.3g'):>10}{_cell(ref, '.3g'):>15}"
                     f"{_cell(ratio, '.3g'):>9}{_cell(row.get('agreement'), '.1e'):>11}  "
                     f"{row.get('reference', '')}"
                     + (f" / {row['target']}" if row.get("target") else ""))
    return "\n".join(lines)


def main() -> int:
    """Run every benchmark and print the table; exit status 1 if one failed to run.

    Returns
    -------
    int
        0 when every benchmark ran, 1 otherwise.
    """
    started = time.perf_counter()
    rows = [row for script in BENCHMARKS for row in benchmark_rows(script)]
    print(table(rows))
    print(f"(all benchmarks: {time.perf_counter() - started:.0f} s wall time)")
    return 1 if any(str(r.get("reference", "")).startswith("failed") for r in rows) else 0


if __name__ == "__main__":
    sys.exit(main())
