"""Make docs/report_screenshot.png, the README's picture of the demo's build report.

'affix demo' runs in a temporary folder; its recalibrated build holds the
report 'affix build' wrote, and the same headless Chromium the tests use
takes the picture at desktop width:

    .venv/bin/python docs/make_report_screenshot.py
"""
from __future__ import annotations

import io
import shutil
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from browser import visit  # noqa: E402
from PIL import Image  # noqa: E402

from affix.workflow.cli import main as affix  # noqa: E402

WIDTH, HEIGHT = 1366, 2300  # the page's top: masthead, verdicts, what it is made of, budget, deviation


def main() -> None:
    chromium = shutil.which("chromium")
    if chromium is None:
        sys.exit("needs chromium (Debian package 'chromium')")
    with tempfile.TemporaryDirectory(prefix="affix-screenshot-") as tmp:
        demo = Path(tmp) / "demo"
        if affix(["demo", str(demo)]) != 0:
            sys.exit("the demo failed")
        seen = visit(chromium, demo / "build" / "report.html", width=WIDTH, height=HEIGHT, full_page=False)
    picture = Image.open(io.BytesIO(seen.screenshot)).convert("RGB")
    # 256 colours: the page is flat colour and text, so the picture stays small and sharp.
    picture.quantize(colors=256, dither=Image.Dither.NONE).save(HERE / "report_screenshot.png", optimize=True)
    print(f"wrote {HERE / 'report_screenshot.png'}")


if __name__ == "__main__":
    main()
