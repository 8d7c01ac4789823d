"""The common ending of the timing benchmarks: load note, the script's table, JSON rows."""

from __future__ import annotations

import json
import os


def print_report(rows: list[dict], print_table) -> int:
    """Print the load average, ``print_table(rows)`` and one JSON object per row; return 0."""
    print(f"# load average at the end: {os.getloadavg()[0]:.2f} (other processes share the "
          "cores; timings are best-of-repeats)")
    print()
    print_table(rows)
    print()
    for r in rows:
        print(json.dumps(r, sort_keys=True))
    return 0
