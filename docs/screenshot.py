"""Take the README's picture of the report's top: build the demo, run it, open report.html in
headless Chromium and save the first screen as docs/report-top.png.

    python docs/screenshot.py                     # the full demo (60 000 customers)
    python docs/screenshot.py --report path/to/report.html
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.cdp import Browser, find_browser  # noqa: E402
from tests.test_browser import CHARTS_DRAWN  # noqa: E402


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--report", type=Path, help="an existing report.html (default: run the demo)")
    p.add_argument("--out", type=Path, default=ROOT / "docs" / "report-top.png")
    p.add_argument("--width", type=int, default=1280)
    p.add_argument("--height", type=int, default=1100)
    args = p.parse_args()
    browser = find_browser()
    if browser is None:
        sys.exit("no chromium found: apt-get install chromium")
    report = args.report
    if report is None:
        folder = Path(tempfile.mkdtemp(prefix="churnlife-shot-")) / "demo"
        cmd = [sys.executable, "-m", "churnlife", "demo", "--folder", str(folder), "--quiet"]
        subprocess.run(cmd, check=True)
        report = folder / "churnlife-output" / "report.html"
    with Browser(browser, args.width, args.height) as b:
        b.open(report.resolve().as_uri())
        b.wait_until(CHARTS_DRAWN, timeout=120)
        b.screenshot(args.out)
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
