"""Regenerate the README's report screenshot from the current demo.

    python docs/make_screenshot.py                       # writes docs/report-screenshot.png
    python docs/make_screenshot.py --out shot.png --size 1280,2000

Runs ``preflight demo`` of this checkout in a fresh interpreter and a
temporary folder, opens the demo's HTML report in headless Chromium (every
network feature off, a new empty profile) and writes the screenshot.  So the
picture always shows what the code in this checkout reports today; rerun it
whenever the report's HTML or the demo changes.  Needs ``chromium`` on PATH
(Debian: ``apt-get install chromium``).  Exits 1 with one line on stderr when
Chromium is missing or writes no usable picture; the old file is then left
as it was.
"""
from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_OUT = ROOT / "docs" / "report-screenshot.png"
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--hide-scrollbars")


def run_demo(folder: Path) -> Path:
    """The demo's HTML report, written by this checkout's code as a user's ``preflight demo`` in ``folder`` would."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    subprocess.run([sys.executable, "-m", "preflight", "demo", "--quiet"],
                   check=True, cwd=folder, env=env, stdout=subprocess.DEVNULL)
    return folder / "preflight-demo" / "kiln-report.html"


def screenshot(chromium: str, page: Path, png: Path, size: tuple[int, int], profile: Path) -> None:
    command = [chromium, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--screenshot={png}",
               f"--window-size={size[0]},{size[1]}", page.resolve().as_uri()]
    subprocess.run(command, capture_output=True, timeout=180, check=False)


def usable(png: Path, size: tuple[int, int]) -> str | None:
    """None when ``png`` is a picture of the requested size with something drawn on it; else why not."""
    if not png.is_file() or png.stat().st_size == 0:
        return "Chromium wrote no screenshot"
    import matplotlib.image as mpimg

    pixels = mpimg.imread(str(png))
    if pixels.shape[:2] != (size[1], size[0]):
        return f"the screenshot is {pixels.shape[1]}x{pixels.shape[0]}, not {size[0]}x{size[1]}"
    if float(pixels[..., :3].std()) < 0.02:
        return "the screenshot is blank"
    return None


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="where to write the PNG")
    parser.add_argument("--size", default="1280,2000", help="window width,height in pixels")
    args = parser.parse_args(argv)
    try:
        width, height = (int(v) for v in args.size.split(","))
    except ValueError:
        print(f"make_screenshot: --size takes WIDTH,HEIGHT, got {args.size!r}", file=sys.stderr)
        return 2
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    if chromium is None:
        print("make_screenshot: chromium is not on PATH (Debian: apt-get install chromium)", file=sys.stderr)
        return 1
    with tempfile.TemporaryDirectory(prefix="preflight-screenshot-") as work:
        work_path = Path(work)
        page = run_demo(work_path)
        png = work_path / "report.png"
        screenshot(chromium, page, png, (width, height), work_path / "profile")
        problem = usable(png, (width, height))
        if problem is not None:
            print(f"make_screenshot: {problem}; {args.out} left as it was", file=sys.stderr)
            return 1
        args.out.parent.mkdir(parents=True, exist_ok=True)
        staged = args.out.with_name(args.out.name + ".partial")
        shutil.copyfile(png, staged)
        os.replace(staged, args.out)
    print(f"wrote {args.out} ({width}x{height}) from the demo's HTML report")
    return 0


if __name__ == "__main__":
    sys.exit(main())
