"""Make the README's screenshot of the report page from a real run.

Runs ``lti-audit compare`` on the demo conveyor-drive models (reference, a state-space
refactor, and the refactor with a changed gearbox ratio) with ``--format html``, opens the
page in headless Chromium and saves the top of it as a small palette PNG::

    .venv/bin/python docs/make_screenshot.py                 # writes docs/report-page.png
    .venv/bin/python docs/make_screenshot.py --out /tmp/x.png

Needs /usr/bin/chromium (Debian: ``apt-get install -y chromium``); the browser test runs
this script too, into a temporary folder.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"
MODELS = ("conveyor_drive_reference.json", "conveyor_drive_refactored.json",
          "conveyor_drive_gain_slip.json")
CHROMIUM = Path("/usr/bin/chromium")


def make_screenshot(out: Path, *, width: int = 1280, height: int = 1480, scale: float = 0.75,
                    colours: int = 128) -> Path:
    """Render the demo report page and save a screenshot of its top at ``out``.

    Raises
    ------
    RuntimeError
        Chromium is missing or fails, or ``lti-audit compare`` does not write the page.
    """
    from PIL import Image

    if not CHROMIUM.exists():
        raise RuntimeError(f"{CHROMIUM} not found (Debian: apt-get install -y chromium)")
    work = Path(tempfile.mkdtemp(prefix="lti-audit-shot-"))
    try:
        page = work / "report.html"
        run = subprocess.run(
            [sys.executable, "-m", "audit.cli", "compare",
             *(str((DEMO / m).relative_to(ROOT)) for m in MODELS),
             "--format", "html", "-o", str(page)],
            capture_output=True, text=True, cwd=ROOT, timeout=300)
        if not page.exists():
            raise RuntimeError(f"lti-audit compare wrote no page (exit {run.returncode}): "
                               f"{run.stderr[-2000:]}")
        raw = work / "raw.png"
        shot = subprocess.run(
            [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", f"--user-data-dir={work / 'profile'}",
             f"--window-size={width},{height}", f"--screenshot={raw}", page.as_uri()],
            capture_output=True, text=True, timeout=120)
        if not raw.exists():
            raise RuntimeError(f"chromium made no screenshot (exit {shot.returncode}): "
                               f"{shot.stderr[-2000:]}")
        img = Image.open(raw).convert("RGB")
        img = img.resize((int(img.width * scale), int(img.height * scale)), Image.LANCZOS)
        img = img.quantize(colors=colours, method=Image.Quantize.FASTOCTREE)
        out.parent.mkdir(parents=True, exist_ok=True)
        img.save(out, optimize=True)
        return out
    finally:
        shutil.rmtree(work, ignore_errors=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "report-page.png")
    args = parser.parse_args(argv)
    path = make_screenshot(args.out)
    print(f"wrote {path} ({path.stat().st_size // 1024} KiB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
