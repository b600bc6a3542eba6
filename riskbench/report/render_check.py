"""Check that a report renders in a headless browser and that every figure in it loads.

Used by the test suite: the page is opened from disk by Debian's ``chromium`` in headless mode with
networking features off and a fresh profile; a small script added to a copy of the page counts the images
whose pixels decoded (``naturalWidth > 0``) and writes the counts into the page title, which is read back
from the dumped DOM.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

BROWSERS: tuple[str, ...] = ("chromium", "chromium-browser")
FLAGS: tuple[str, ...] = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--no-first-run",
    "--disable-extensions",
    "--disable-sync",
    "--virtual-time-budget=15000",
    "--dump-dom",
)
_PROBE = (
    "<script>window.addEventListener('load', function () {"
    " var imgs = Array.prototype.slice.call(document.images);"
    " var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); }).length;"
    " document.title = 'RENDERCHECK images=' + imgs.length + ' broken=' + bad; });</script>"
)
_RESULT = re.compile(r"RENDERCHECK images=(\d+) broken=(\d+)")


@dataclass(frozen=True)
class RenderCheck:
    """How many images the page has and how many failed to load."""

    images: int
    broken: int


def find_chromium() -> str | None:
    """Path of a chromium executable on PATH, or None."""
    for name in BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


def chromium_or_reason(*, install: bool = False) -> tuple[str | None, str]:
    """``(path, "")`` when chromium is available, else ``(None, why not)``.

    With ``install=True`` and running as root, try ``apt-get install -y chromium`` once (Debian's package,
    from the configured package mirror) before giving up.
    """
    path = find_chromium()
    if path or not install:
        return path, "" if path else "chromium is not installed"
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or not shutil.which("apt-get"):
        return None, "chromium is not installed and cannot be installed here (needs root and apt-get)"
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    try:
        subprocess.run(
            ["apt-get", "install", "-y", "-qq", "chromium"], env=env, capture_output=True, timeout=600, check=True
        )
    except (OSError, subprocess.SubprocessError) as exc:
        return None, f"chromium is not installed and apt-get install chromium failed ({type(exc).__name__})"
    path = find_chromium()
    return path, "" if path else "apt-get install chromium ran but no chromium executable was found"


def check_report_renders(html_path: str | Path, chromium: str, *, timeout: float = 120) -> RenderCheck:
    """Open a copy of ``html_path`` (with a probe script) in headless chromium; count images and failures.

    Raises
    ------
    RuntimeError
        If the browser did not produce the probe's result (it crashed or the page did not load).
    """
    html = Path(html_path).read_text(encoding="utf-8")
    probed = html.replace("</body>", _PROBE + "</body>") if "</body>" in html else html + _PROBE
    with tempfile.TemporaryDirectory(prefix="riskbench-render-") as tmp:
        page = Path(tmp) / "page.html"
        page.write_text(probed, encoding="utf-8")
        profile = Path(tmp) / "profile"
        proc = subprocess.run(
            [chromium, *FLAGS, f"--user-data-dir={profile}", page.as_uri()],
            capture_output=True,
            text=True,
            timeout=timeout,
        )
    found = _RESULT.search(proc.stdout)
    if not found:
        raise RuntimeError(f"chromium did not render the page (exit {proc.returncode}): {proc.stderr[-500:]}")
    return RenderCheck(images=int(found.group(1)), broken=int(found.group(2)))


def require_chromium(*, install: bool = True) -> str:
    """The chromium path, or raise :class:`unittest.SkipTest` with the reason (test-setup helper: test
    runners, pytest included, report that as a skip)."""
    import unittest

    path, reason = chromium_or_reason(install=install)
    if path is None:
        raise unittest.SkipTest(f"headless browser check skipped: {reason}")
    return path
