"""Open an HTML report in a real (headless) Chromium and check it.

Use from any test::

    from browser_check import check_report_in_browser
    check_report_in_browser(path)                       # raises AssertionError on a problem
    check_report_in_browser(path, expect_text=["<script>alert(1)</script>"])

Checks: the page loads; the browser console shows no error; every ``<img>``
decodes (``naturalWidth > 0``); at least ``min_tables`` tables with rows are
present; the page requested no resource from anywhere (network, file); no
``alert`` dialog is open; the only ``<script>`` element is the report's own;
the strings in ``expect_text`` appear in the rendered text (e.g. an injected
``<script>`` shown as text).

Chromium is started with networking features off and a fresh profile folder
(Debian packages ``chromium`` and ``chromium-driver``).  A missing browser is a
failure, never a skip.  One browser is shared by all checks of a test process
and closed at exit.
"""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from pathlib import Path

CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "/usr/bin/chromium-browser", "/usr/bin/google-chrome")
DRIVER_CANDIDATES = ("/usr/bin/chromedriver", "/usr/lib/chromium/chromedriver")

_driver = None
_profile_dir: str | None = None


def _find(candidates: tuple[str, ...], name: str) -> str:
    for c in candidates:
        if os.path.exists(c):
            return c
    found = shutil.which(name)
    if found:
        return found
    raise AssertionError(
        f"{name} is not installed; install the Debian packages chromium and chromium-driver "
        "(apt-get install chromium chromium-driver) to run the browser checks"
    )


def _close() -> None:
    global _driver, _profile_dir
    if _driver is not None:
        try:
            _driver.quit()
        except Exception:  # noqa: BLE001 - best effort at exit
            pass
        _driver = None
    if _profile_dir:
        shutil.rmtree(_profile_dir, ignore_errors=True)
        _profile_dir = None


def browser():
    """The shared headless Chromium driver (started on first use)."""
    global _driver, _profile_dir
    if _driver is not None:
        return _driver
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError as exc:  # pragma: no cover - environment problem
        raise AssertionError("selenium is not installed (pip install selenium)") from exc
    os.environ.setdefault("SE_OFFLINE", "true")  # never let selenium fetch a driver
    binary = _find(CHROMIUM_CANDIDATES, "chromium")
    driver_path = _find(DRIVER_CANDIDATES, "chromedriver")
    _profile_dir = tempfile.mkdtemp(prefix="fractalseq-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = binary
    for arg in (
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-quic",
        "--no-first-run",
        "--no-default-browser-check",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-extensions",
        "--disable-default-apps",
        "--metrics-recording-only",
        "--host-resolver-rules=MAP * ~NOTFOUND",
        f"--user-data-dir={_profile_dir}",
        "--window-size=1280,1000",
    ):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    _driver = webdriver.Chrome(service=Service(executable_path=driver_path), options=opts)
    _driver.set_page_load_timeout(60)
    atexit.register(_close)
    return _driver


def _no_alert(drv, path: Path) -> None:
    """Fail (after dismissing it) if an alert dialog is open."""
    from selenium.common.exceptions import NoAlertPresentException

    try:
        alert = drv.switch_to.alert
        text = alert.text
        alert.dismiss()
    except NoAlertPresentException:
        return
    raise AssertionError(f"{path.name}: an alert dialog opened ({text!r}); some input text was not escaped")


def check_report_in_browser(
    path: str | Path,
    *,
    min_tables: int = 1,
    min_images: int = 0,
    expect_text: tuple[str, ...] | list[str] = (),
    max_scripts: int = 1,
) -> dict:
    """Load ``path`` in headless Chromium and assert it is a sound report page.

    Parameters
    ----------
    path:
        The HTML file.
    min_tables:
        At least this many ``<table>`` elements, each with at least one body row.
    min_images:
        At least this many ``<img>`` elements (all of them must decode).
    expect_text:
        Strings that must appear in the page's rendered text (``innerText``).
    max_scripts:
        Most ``<script>`` elements allowed (the report writes exactly one).

    Returns
    -------
    dict
        What was seen: ``images``, ``tables``, ``scripts``, ``console`` (all entries).
    """
    from selenium.common.exceptions import UnexpectedAlertPresentException

    path = Path(path).resolve()
    assert path.is_file(), f"report {path} does not exist"
    drv = browser()
    drv.get_log("browser")  # drain entries of earlier pages
    try:
        drv.get(path.as_uri())
        _no_alert(drv, path)
        state = drv.execute_script("return document.readyState")
    except UnexpectedAlertPresentException as exc:
        _no_alert(drv, path)  # dismisses it and fails
        raise AssertionError(f"{path.name}: an alert dialog opened ({exc.alert_text!r}); some text was not escaped") from None
    assert state == "complete", f"{path.name}: page did not finish loading ({state})"
    # images: wait until each finished decoding (they are data URIs, so this is quick)
    images = drv.execute_async_script(
        """
        const done = arguments[arguments.length - 1];
        const imgs = Array.from(document.images);
        Promise.all(imgs.map(i => i.decode().then(() => true, () => false))).then(ok =>
          done(imgs.map((i, k) => ({src: i.src.slice(0, 30), w: i.naturalWidth, h: i.naturalHeight, ok: ok[k],
                                     alt: i.alt}))));
        """
    )
    _no_alert(drv, path)
    tables = drv.execute_script(
        "return Array.from(document.querySelectorAll('table')).map(t => t.tBodies.length ? t.tBodies[0].rows.length : 0)"
    )
    scripts = drv.execute_script("return document.querySelectorAll('script').length")
    handlers = drv.execute_script(
        "return Array.from(document.querySelectorAll('*')).filter(e => Array.from(e.attributes)"
        ".some(a => a.name.startsWith('on'))).length"
    )
    resources = drv.execute_script(
        "return performance.getEntriesByType('resource').map(e => e.name).filter(n => !n.startsWith('data:'))"
    )
    body_text = drv.execute_script("return document.body.innerText")
    console = drv.get_log("browser")

    errors = [e for e in console if e.get("level") == "SEVERE"]
    assert not errors, f"{path.name}: browser console errors: {[e.get('message') for e in errors]}"
    assert len(images) >= min_images, f"{path.name}: {len(images)} images, expected at least {min_images}"
    bad = [i for i in images if not i["ok"] or i["w"] <= 0 or i["h"] <= 0]
    assert not bad, f"{path.name}: images that do not decode: {bad}"
    assert len(tables) >= min_tables, f"{path.name}: {len(tables)} tables, expected at least {min_tables}"
    if min_tables:
        assert all(n > 0 for n in tables), f"{path.name}: empty tables (rows per table {tables})"
    assert scripts <= max_scripts, f"{path.name}: {scripts} <script> elements; only the report's own is allowed"
    assert handlers == 0, f"{path.name}: {handlers} elements carry inline event handlers (on...=)"
    assert not resources, f"{path.name}: the page requested external resources {resources}"
    for t in expect_text:
        assert t in body_text, f"{path.name}: expected text {t!r} not shown on the page"
    return {"images": images, "tables": tables, "scripts": scripts, "console": console}


def click_sort(path: str | Path, table_index: int = 0, column: int = 0) -> list[str]:
    """Load ``path``, click a table heading, and return that column's cell texts after sorting."""
    from selenium.webdriver.common.by import By

    drv = browser()
    drv.get(Path(path).resolve().as_uri())
    table = drv.find_elements(By.CSS_SELECTOR, "table")[table_index]
    table.find_elements(By.CSS_SELECTOR, "thead th")[column].click()
    return [r.find_elements(By.TAG_NAME, "td")[column].text for r in table.find_elements(By.CSS_SELECTOR, "tbody tr")]
