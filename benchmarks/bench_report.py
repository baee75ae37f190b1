"""Time and size of the HTML report of the shipped demo model (INVENTED data).

Run: python benchmarks/bench_report.py [OUT.html]
Prints the seconds to load the model, to build the page, and the page's size.
Target (common practice, no source): under 30 s and under 10 MB on two cores.
"""

import sys
import tempfile
import time
from pathlib import Path

from dopantgap.report import build_report
from dopantgap.store import load_model

ROOT = Path(__file__).resolve().parents[1]


def main(out=None):
    out = Path(out) if out else Path(tempfile.mkdtemp()) / "report.html"
    started = time.perf_counter()
    surrogate, manifest = load_model(ROOT / "models" / "demo")
    loaded = time.perf_counter()
    build_report(surrogate, manifest, out, element_symbols=("Tc", "Ce"), model_dir=ROOT / "models" / "demo")
    finished = time.perf_counter()
    size = out.stat().st_size
    print(f"model load      {loaded - started:6.1f} s")
    print(f"report build    {finished - loaded:6.1f} s")
    print(f"total           {finished - started:6.1f} s   (target < 30 s)")
    print(f"page size       {size / 1e6:6.2f} MB  (target < 10 MB) -> {out}")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
