"""Make docs/figures/report.png: the top of the demo report as a browser shows it.

Runs ``tracefit demo`` into a temporary folder, has headless Chromium (Debian's ``chromium``)
take a screenshot of the report, and stores it as a palette PNG below 400 kB::

    python docs/figures/report_screenshot.py
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from PIL import Image

from tracefit.demo import run_demo

OUT = Path(__file__).resolve().parent / "report.png"
WIDTH, HEIGHT = 1280, 1900


def main() -> int:
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    if chromium is None:
        print("chromium is not installed (apt-get install chromium)", file=sys.stderr)
        return 1
    with tempfile.TemporaryDirectory() as tmp:
        res = run_demo(Path(tmp) / "demo", workers=2, progress=False)
        shot = Path(tmp) / "shot.png"
        subprocess.run(
            [chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={Path(tmp) / 'profile'}", "--hide-scrollbars", f"--window-size={WIDTH},{HEIGHT}",
             f"--screenshot={shot}", res.report_path.resolve().as_uri()],
            check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, timeout=120,
        )
        img = Image.open(shot).convert("RGB")
        img = img.resize((img.width * 3 // 4, img.height * 3 // 4), Image.LANCZOS)
        img.quantize(colors=128, method=Image.Quantize.MEDIANCUT).save(OUT, optimize=True)
    print(f"wrote {OUT} ({OUT.stat().st_size / 1e3:.0f} kB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
