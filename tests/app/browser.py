"""Open an HTML file in headless Chromium (Debian's package) through Playwright and report what loaded."""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


@dataclass(frozen=True)
class PageCheck:
    console_errors: tuple[str, ...]
    images_total: int
    images_loaded: int
    parameter_rows: int
    title: str
    text: str
    headings: tuple[str, ...]
    warnings: tuple[str, ...]


def chromium_path() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def open_report(html: Path, screenshot: Path) -> PageCheck:
    from playwright.sync_api import sync_playwright

    exe = chromium_path()
    if exe is None:
        raise RuntimeError(
            "no Chromium on PATH: install it (Debian/Ubuntu: sudo apt-get install chromium), or run the "
            'fast loop without the browser test: python -m pytest -m "not slow"'
        )
    errors: list[str] = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=exe, args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1200, "height": 900})
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(html.resolve().as_uri())
            page.wait_for_load_state("load")
            loaded = page.eval_on_selector_all("img", "els => els.map(e => e.complete && e.naturalWidth > 0)")
            rows = page.eval_on_selector_all("#parameters tbody tr", "els => els.length")
            title = page.title()
            text = page.inner_text("body")
            # innerText as shown, after CSS (text-transform would show here)
            headings = page.eval_on_selector_all(
                "h1, h2, h3, .card .label, th", "els => els.map(e => e.innerText)"
            )
            warnings = page.eval_on_selector_all("#warnings li", "els => els.map(e => e.innerText)")
            screenshot.parent.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(screenshot), full_page=True)
        finally:
            browser.close()
    return PageCheck(
        tuple(errors),
        len(loaded),
        sum(bool(x) for x in loaded),
        int(rows),
        title,
        text,
        tuple(headings),
        tuple(warnings),
    )
