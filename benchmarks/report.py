"""Size and time of the HTML run report (chiropt.report.html).

Run by hand: ``python benchmarks/report.py RUN_DIR [--details N]`` on a finished run
folder. Prints the time to write the page, its size, and the size per front design with
spectra and maps (the page's data split by part). The report is written to a temporary
folder; the run folder is only read.
"""

import argparse
import json
import re
import tempfile
import time
from pathlib import Path

from chiropt.report.html import DETAILS_MAX, write_html_report


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("run_dir")
    ap.add_argument("--details", type=int, default=DETAILS_MAX)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "report.html"
        t = time.perf_counter()
        write_html_report([args.run_dir], out, details=args.details)
        dt = time.perf_counter() - t
        text = out.read_text()
    data = json.loads(re.search(r'id="report-data">(.*?)</script>', text, re.S).group(1))
    run = data["runs"][0]
    n = len(run["details"])
    print(f"front designs: {len(run['front'])}, with spectra and maps: {n}")
    print(f"time to write: {dt:.1f} s ({dt / max(n, 1):.2f} s per detailed design)")
    print(f"page size: {len(text.encode()) / 1e6:.2f} MB")
    parts = {k: len(json.dumps(v)) for k, v in run.items()}
    for k, v in sorted(parts.items(), key=lambda kv: -kv[1])[:5]:
        print(f"  {k:12s} {v / 1e3:8.1f} kB")
    if n:
        print(f"per detailed design: {parts['details'] / n / 1e3:.1f} kB")


if __name__ == "__main__":
    main()
