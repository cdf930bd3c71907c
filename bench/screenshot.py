"""Make the README's screenshot of a demo report, and print the demo's story from the data.

    .venv/bin/python bench/screenshot.py [--out DIR] [--night N] [--png bench/screenshots/report.png] [--story]

Runs ``truthsieve demo`` into ``--out`` (a temporary folder by default), takes a headless
Chromium screenshot of night N's ``report.html`` (the first screen, 1280 px wide), reduces
it to a small palette PNG, and with ``--story`` prints the "what happened" sentences of
the index as a Markdown list (the README's demo section is pasted from it).
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=None, help="demo output folder (default: a temporary one)")
    parser.add_argument("--night", type=int, default=None, help="night number, 1-14 (default: the first night the strategic member bends)")
    parser.add_argument("--png", type=Path, default=ROOT / "bench" / "screenshots" / "report.png")
    parser.add_argument("--height", type=int, default=900)
    parser.add_argument("--story", action="store_true", help="print the story of the nights as Markdown")
    args = parser.parse_args(argv)

    from PIL import Image

    from truthsieve.pipeline import demo
    from truthsieve.pipeline.cli import main as truthsieve
    from truthsieve.pipeline.decision import decision_from_json
    from truthsieve.pipeline.ledger import read_ledger
    from truthsieve.pipeline.report_story import story

    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        print("error: chromium is not installed", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory() as scratch:
        out = args.out or Path(scratch) / "out"
        if not (out / "index.html").is_file():
            code = truthsieve(["demo", "--out", str(out)])
            if code:
                return code
        night = args.night or demo.STRATEGIC_FROM
        page = out / f"batch_date={demo.night_dates()[night - 1]}" / "report.html"
        raw = Path(scratch) / "raw.png"
        subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", f"--user-data-dir={Path(scratch) / 'profile'}",
             f"--window-size=1280,{args.height}", f"--screenshot={raw}", page.as_uri()],
            check=True, capture_output=True, timeout=180,
        )
        args.png.parent.mkdir(parents=True, exist_ok=True)
        image = Image.open(raw).convert("RGB").resize((960, round(args.height * 960 / 1280)), Image.LANCZOS)
        image.quantize(colors=64).save(args.png, optimize=True)
        print(f"screenshot of {page.name} for night {night}: {args.png} ({args.png.stat().st_size // 1024} KiB)")
        if args.story:
            decisions = [decision_from_json(json.loads(p.read_text())) for p in sorted(out.glob("batch_date=*/decision.json"))]
            print()
            for line in story(decisions, read_ledger(out)):
                print(f"- {line}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
