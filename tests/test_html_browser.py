"""The demo's HTML report, opened in headless Chromium, renders to a non-blank page.

Skipped, with the reason shown, when no ``chromium`` is on PATH (CI installs
it in .ci/run).
"""

from __future__ import annotations

import os
import shutil
import subprocess

import numpy as np
import pytest
from test_report_renderers import demo_html

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def screenshot(html_path: str, png_path: str, profile: str, size: str = "1280,2000") -> None:
    """Render ``html_path`` with headless Chromium to ``png_path``, with every network feature off."""
    command = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={profile}", f"--screenshot={png_path}", f"--window-size={size}",
               "file://" + os.path.abspath(html_path)]
    subprocess.run(command, capture_output=True, timeout=120, check=False)


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not on PATH: the browser rendering check did not run")
def test_demo_html_renders_in_chromium(tmp_path_factory, tmp_path):
    import matplotlib.image as mpimg

    page = tmp_path / "kiln-report.html"
    page.write_text(demo_html(str(tmp_path_factory.getbasetemp())), encoding="utf-8")
    png = tmp_path / "kiln-report.png"
    screenshot(str(page), str(png), str(tmp_path / "profile"))
    assert png.is_file() and png.stat().st_size > 0, "chromium wrote no screenshot"
    pixels = mpimg.imread(str(png))
    assert pixels.shape[0] == 2000 and pixels.shape[1] == 1280
    rgb = pixels[..., :3]
    assert float(rgb.std()) > 0.02
    distinct = np.unique((rgb.reshape(-1, 3) * 255).round().astype(np.uint8), axis=0)
    assert distinct.shape[0] > 1
    # Text and plots fill the page: the top, middle and bottom thirds are each not blank.
    for third in np.array_split(rgb, 3, axis=0):
        assert float(third.std()) > 0.02
