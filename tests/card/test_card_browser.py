"""Render card.html in a real headless browser (Chromium) when one is installed.

Skipped, with the reason, when no browser is on PATH (CI installs none). The check: the page
loads from a file with the network unused, the screenshot is written, and it is not blank.
"""

from __future__ import annotations

import shutil
import subprocess

import pytest

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")


def find_browser() -> str | None:
    return next((path for path in map(shutil.which, BROWSERS) if path), None)


@pytest.mark.skipif(find_browser() is None, reason="no headless browser (chromium) installed; card.html not rendered")
def test_demo_card_renders_in_headless_chromium(demo_output, tmp_path):
    png = tmp_path / "card.png"
    profile = tmp_path / "profile"
    cmd = [
        find_browser(), "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={profile}", f"--screenshot={png}", "--window-size=900,2400",
        (demo_output / "card.html").as_uri(),
    ]
    subprocess.run(cmd, check=True, timeout=120, capture_output=True)
    assert png.exists() and png.stat().st_size > 10_000
    from PIL import Image  # comes with matplotlib

    with Image.open(png) as image:
        colours = image.convert("RGB").getcolors(maxcolors=1 << 20)
    assert colours is not None and len(colours) > 50  # text and charts, not a blank page
