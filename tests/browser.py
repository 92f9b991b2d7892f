"""Load a local HTML page in headless Chromium (selenium) and report what it saw.

Uses Debian's ``chromium`` and ``chromium-driver`` packages at fixed paths;
selenium is given the driver path, so it never runs selenium-manager or
downloads anything. The browser is started with networking features off and
a fresh profile, so a page that tried to reach the network would show it as a
console error rather than silently succeed.

If the browser is missing the test is skipped locally but FAILS when the
environment variable ``CI`` is set: CI must run the browser tests.

Usage::

    from browser import load_in_browser
    seen = load_in_browser(tmp_path / "report.html")
    assert not [e for e in seen["log"] if e["level"] == "SEVERE"]

or, for several pages, one driver per test module::

    with browser_session() as driver:
        seen = load_page(driver, path)
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
APT_PACKAGES = "chromium chromium-driver"

ARGS = (
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-quic",
)

_IMAGES_JS = """
return Array.from(document.images).map(function (im) {
  return {src: im.getAttribute('src') || '', alt: im.getAttribute('alt'),
          complete: im.complete, naturalWidth: im.naturalWidth,
          naturalHeight: im.naturalHeight};
});
"""


def in_ci() -> bool:
    """True when the environment variable ``CI`` is set (to anything but 0/false)."""
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def require_browser() -> None:
    """Skip (locally) or fail (in CI) unless Chromium, its driver and selenium are present."""
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not os.access(p, os.X_OK)]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium Python package")
    if not missing:
        return
    reason = (f"browser test needs {', '.join(missing)} "
              f"(Debian/Ubuntu: apt-get install {APT_PACKAGES})")
    if in_ci():
        pytest.fail(reason + "; CI must run the browser tests", pytrace=False)
    pytest.skip(reason)


@contextmanager
def browser_session() -> Iterator[Any]:
    """A headless Chromium WebDriver with browser console logging; always quit afterwards."""
    require_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    profile = tempfile.mkdtemp(prefix="preyscape-chromium-")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in ARGS:
        options.add_argument(arg)
    options.add_argument(f"--user-data-dir={profile}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = None
    try:
        # an explicit driver path: selenium skips selenium-manager (no downloads)
        driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
        driver.set_page_load_timeout(30)
        yield driver
    finally:
        if driver is not None:
            driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


def load_page(driver: Any, html_path: str | os.PathLike,
              extra: dict[str, str] | None = None) -> dict[str, Any]:
    """Open a local file in ``driver`` and return what the browser saw.

    Parameters
    ----------
    driver : selenium WebDriver
        From :func:`browser_session`.
    html_path : path
        The page to open (as a ``file://`` URL).
    extra : dict, optional
        Name -> JavaScript function body (``"return ..."``) to evaluate after
        loading; results are returned under ``"extra"``.

    Returns
    -------
    dict
        ``log`` (console entries of this page: dicts with ``level``,
        ``message``), ``images`` (``src``, ``alt``, ``complete``,
        ``naturalWidth``, ``naturalHeight``), ``text``
        (``document.body.innerText``), ``title``, ``scripts`` (number of
        ``<script>`` elements), ``extra``.
    """
    from selenium.webdriver.support.ui import WebDriverWait

    driver.get_log("browser")  # drop entries of an earlier page
    driver.get(Path(html_path).resolve().as_uri())
    WebDriverWait(driver, 20).until(
        lambda d: d.execute_script("return document.readyState") == "complete")
    return {
        "images": driver.execute_script(_IMAGES_JS),
        "text": driver.execute_script("return document.body.innerText"),
        "title": driver.title,
        "scripts": driver.execute_script("return document.getElementsByTagName('script').length"),
        "extra": {k: driver.execute_script(js) for k, js in (extra or {}).items()},
        # read last, so messages logged while the page loaded are all in
        "log": driver.get_log("browser"),
    }


def load_in_browser(html_path: str | os.PathLike,
                    extra: dict[str, str] | None = None) -> dict[str, Any]:
    """Start headless Chromium, load one page (see :func:`load_page`), quit."""
    with browser_session() as driver:
        return load_page(driver, html_path, extra)
