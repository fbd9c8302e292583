"""The saved HTML report in headless Chromium with the network switched off.

The page must render its figures and verdict from the file alone: the browser context is
offline and a route aborts (and records) every request that is not for a local file.
Skips (with the reason) only when chromium or playwright is missing, and never under
CI=true, where they are installed and the test must run.
"""

from __future__ import annotations

import importlib.util
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
CHROMIUM = os.environ.get("HEDGEROW_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run",
                  "--disable-dev-shm-usage"]


def _missing():
    out = [] if importlib.util.find_spec("playwright") else ["the playwright package"]
    if not Path(CHROMIUM).exists():
        out.append(f"chromium at {CHROMIUM}")
    return out


_MISSING = _missing()
if _MISSING:
    reason = f"offline report test needs {', '.join(_MISSING)} (install the test extra and " \
             f"chromium)"
    if os.environ.get("CI", "").lower() == "true":
        raise RuntimeError(f"CI=true but {reason}")
    pytest.skip(reason, allow_module_level=True)

from playwright.sync_api import sync_playwright  # noqa: E402

from hedgerow import LocalLinearForestRegressor, TreatmentEffectForest  # noqa: E402
from hedgerow.report import build_effect_report, build_report, write_html  # noqa: E402


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    """A small report (invented data: a pump's flow against its speed) saved to disk."""
    rng = np.random.default_rng(8)
    n = 200
    X = pd.DataFrame({"speed <rpm>": rng.uniform(500.0, 3000.0, n),
                      "inlet temp": rng.normal(15.0, 4.0, n),
                      "vibration": rng.gamma(2.0, 1.0, n)})
    y = pd.Series(40.0 * np.tanh((X["speed <rpm>"] - 500.0) / 1200.0)
                  + rng.normal(0.0, 3.0, n), name="flow")
    model = LocalLinearForestRegressor(n_estimators=40, random_state=1).fit(X, y)
    report = build_report(X, y, model=model, title="Pump 4 <offline check>", progress=False)
    path = tmp_path_factory.mktemp("report") / "pump4.html"
    write_html(report, path)
    return report, path


@pytest.fixture(scope="module")
def browser_context(tmp_path_factory):
    """A fresh-profile headless Chromium context, offline, every non-file request aborted."""
    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(tmp_path_factory.mktemp("profile")), executable_path=CHROMIUM,
            headless=True, args=CHROMIUM_FLAGS, viewport={"width": 1200, "height": 900})
        ctx.set_offline(True)
        ctx.attempted = []  # every request seen, local or not

        def guard(route):
            url = route.request.url
            ctx.attempted.append(url)
            if url.startswith("file:"):
                route.continue_()
            else:
                route.abort()

        ctx.route("**/*", guard)
        yield ctx
        ctx.close()


def _open(ctx, url):
    page = ctx.new_page()
    page.console_lines = []
    page.requested = []
    page.on("console", lambda m: page.console_lines.append(f"{m.type}: {m.text}"))
    page.on("request", lambda r: page.requested.append(r.url))
    page.goto(url, wait_until="load")
    return page


def test_guard_catches_a_network_request(browser_context, tmp_path):
    """The harness itself: a page that does fetch something is seen and blocked."""
    probe = tmp_path / "fetches.html"
    probe.write_text('<!DOCTYPE html><html><body><img src="http://example.invalid/x.png">'
                     "</body></html>")
    browser_context.attempted.clear()
    page = _open(browser_context, probe.as_uri())
    page.wait_for_timeout(200)
    remote = [u for u in page.requested if not u.startswith("file:")]
    assert remote == ["http://example.invalid/x.png"]
    assert "http://example.invalid/x.png" in browser_context.attempted  # the route saw it
    page.close()


def test_report_renders_offline(browser_context, saved):
    report, path = saved
    browser_context.attempted.clear()
    page = _open(browser_context, path.as_uri())
    try:
        page.wait_for_timeout(300)
        remote = [u for u in page.requested + browser_context.attempted
                  if not u.startswith("file:")]
        assert remote == [], f"the report asked the network for {remote}"
        assert page.requested == [path.as_uri()]  # nothing fetched besides the page

        assert page.title() == "Pump 4 <offline check>"
        figures = page.locator("svg.hr-figure")
        assert figures.count() == 3
        for i in range(3):
            fig = figures.nth(i)
            fig.scroll_into_view_if_needed()
            box = fig.bounding_box()
            assert box and box["width"] > 300 and box["height"] > 150, (i, box)
            # drawn content, not an empty frame
            assert fig.locator("path").count() > 10
        slice_text = page.locator("#slice svg").text_content()
        assert "speed <rpm>" in slice_text and "local linear forest" in slice_text
        conclusion = page.locator("#verdict-conclusion")
        assert conclusion.is_visible()
        assert conclusion.inner_text().strip() == report.verdict.conclusion
        rows = page.locator("#verdict table tbody tr")
        assert rows.count() == len(report.verdict.comparisons)
        for sid in report.sections:
            assert page.locator(f"section#{sid}").is_visible(), sid
        errors = [c for c in page.console_lines if c.startswith("error")]
        assert errors == [], errors  # e.g. a Content-Security-Policy violation
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "report_offline.png"), full_page=True)
        for stale in ("report_offline_failure.png", "report_offline_console.txt"):
            (ARTIFACTS / stale).unlink(missing_ok=True)
    except Exception:
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "report_offline_failure.png"), full_page=True)
        (ARTIFACTS / "report_offline_console.txt").write_text("\n".join(page.console_lines))
        raise
    finally:
        page.close()


@pytest.fixture(scope="module")
def saved_effect(tmp_path_factory):
    """A small effect report (invented data: a soil treatment on plots) saved to disk."""
    rng = np.random.default_rng(9)
    n = 300
    X = pd.DataFrame({"slope <deg>": rng.uniform(0.0, 20.0, n),
                      "clay & silt": rng.uniform(0.1, 0.6, n)})
    w = (rng.random(n) < 0.5).astype(float)
    y = 2.0 + 0.1 * X["slope <deg>"] + w * (1.0 + 0.08 * X["slope <deg>"]) \
        + rng.normal(0.0, 0.5, n)
    model = TreatmentEffectForest(n_estimators=200, random_state=1).fit(X, y.to_numpy(), w)
    report = build_effect_report(X, y.to_numpy(), w, model=model, feature="slope <deg>",
                                 title="Plots <offline effect check>", progress=False)
    path = tmp_path_factory.mktemp("effect") / "plots.html"
    write_html(report, path)
    return report, path


def test_effect_report_renders_offline(browser_context, saved_effect):
    report, path = saved_effect
    browser_context.attempted.clear()
    page = _open(browser_context, path.as_uri())
    try:
        page.wait_for_timeout(300)
        remote = [u for u in page.requested + browser_context.attempted
                  if not u.startswith("file:")]
        assert remote == [], f"the effect report asked the network for {remote}"
        assert page.title() == "Plots <offline effect check>"
        caution = page.locator("#effect-caution")
        assert caution.is_visible()
        figures = page.locator("svg.hr-figure")
        assert figures.count() == len(report.figures) == 3  # overlap, slope, verdict
        caution_top = caution.bounding_box()["y"]
        for i in range(figures.count()):
            fig = figures.nth(i)
            fig.scroll_into_view_if_needed()
            box = fig.bounding_box()
            assert box and box["width"] > 300 and box["height"] > 120, (i, box)
            assert fig.locator("path").count() > 5
            assert page.evaluate("e => e.getBoundingClientRect().top + window.scrollY",
                                 fig.element_handle()) > caution_top
        along = page.locator("#effect-along svg").text_content()
        assert "slope <deg>" in along and "corrected forest" in along
        assert page.locator("#effect-along figcaption").first.is_visible()
        errors = [c for c in page.console_lines if c.startswith("error")]
        assert errors == [], errors
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "effect_report_offline.png"), full_page=True)
    except Exception:
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "effect_report_offline_failure.png"),
                        full_page=True)
        raise
    finally:
        page.close()
