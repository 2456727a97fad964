"""The system's Chromium driven by playwright, for the tests of the one-page report.

Without Chromium (or playwright) the browser tests are skipped on a developer's machine and fail when ``CI`` is
set (``.ci/run`` installs the Debian package ``chromium`` when it is missing).
"""

import contextlib
import os
import shutil

import pytest

CHROMIUM = shutil.which("chromium")
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
               "--disable-sync", "--no-first-run"]  # fmt: skip


def need_chromium():
    """Skip without Chromium on a developer's machine; in CI (CI set) its absence is a failure."""
    if CHROMIUM is None:
        message = "Chromium is not on PATH (apt-get install chromium); the page's browser tests need it"
        if os.environ.get("CI"):
            pytest.fail(message)
        pytest.skip(message)


@contextlib.contextmanager
def launched():
    """A headless Chromium (playwright's ``Browser``), closed on exit."""
    need_chromium()
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        if os.environ.get("CI"):
            pytest.fail("playwright is not installed (pip install '.[test]')")
        pytest.skip("playwright is not installed")
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            yield b
        finally:
            b.close()
