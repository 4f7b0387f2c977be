"""The overview page in headless Chromium: open time and filter-keystroke latency.

    python -m tests.bench.overview SITE_DIR [--runs 3]

open_ms       navigation start to the first frame after the page's ``load`` event: the table's
              rows are in the DOM (site.js fills them on DOMContentLoaded) and laid out.  Median
              of ``--runs`` fresh page loads.
keystroke_ms  one character typed into the filter box: from the ``input`` event to the next frame
              painted after the table updated (a ``requestAnimationFrame`` followed by a task, so
              style, layout and paint of the new rows are inside).  Median over typing a query
              and deleting it again, on every run.

Chromium is the system's (/usr/bin/chromium) driven through Playwright, as in the browser tests.
Returns None from :func:`measure` when either is missing, so the benchmark still runs.
"""

from __future__ import annotations

import argparse
import json
import statistics
from pathlib import Path
from typing import Any

CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-background-networking",
    "--disable-component-update", "--no-first-run",
]
QUERY = "acc-gbx-01-1"  # synthetic ids are "<demo id>-<bay>" (synth.py): wide at "a", a few rows at the end

_OPENED = """() => new Promise(done => requestAnimationFrame(() => setTimeout(() => done({
    ms: performance.now(),
    rows: document.querySelectorAll('#channel-table tbody tr').length,
  }), 0)))"""

_KEYSTROKES = """async (query) => {
  const box = document.querySelector('form.filters input[name=q]');
  const frame = () => new Promise(done => requestAnimationFrame(() => setTimeout(done, 0)));
  const steps = [];
  for (let i = 1; i <= query.length; i++) steps.push(query.slice(0, i));
  for (let i = query.length - 1; i >= 0; i--) steps.push(query.slice(0, i));
  const out = [];
  await frame();
  for (const value of steps) {
    const t0 = performance.now();
    box.value = value;
    box.dispatchEvent(new Event('input', {bubbles: true}));
    await frame();
    out.push(performance.now() - t0);
  }
  return out;
}"""


def available() -> bool:
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return False
    return CHROMIUM.is_file()


def measure(site_dir: Path, runs: int = 3, query: str = QUERY) -> dict[str, Any] | None:
    """Median open time and filter-keystroke latency of ``site_dir/index.html``, in milliseconds."""
    if not available():
        return None
    from playwright.sync_api import sync_playwright

    url = (site_dir / "index.html").resolve().as_uri()
    opens: list[float] = []
    keys: list[float] = []
    rows = 0
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=LAUNCH_ARGS, headless=True)
        try:
            for _ in range(runs):
                page = browser.new_page(viewport={"width": 1280, "height": 900})
                page.goto(url, wait_until="load", timeout=120_000)
                opened = page.evaluate(_OPENED)
                opens.append(float(opened["ms"]))
                rows = int(opened["rows"])
                keys.extend(float(k) for k in page.evaluate(_KEYSTROKES, query))
                page.close()
        finally:
            browser.close()
    return {
        "open_ms": round(statistics.median(opens), 1),
        "keystroke_ms": round(statistics.median(keys), 1),
        "keystroke_ms_max": round(max(keys), 1),
        "all_open_ms": [round(x, 1) for x in opens],
        "rows_in_dom_at_open": rows,
    }


def main() -> None:
    p = argparse.ArgumentParser(description="overview page timings in headless Chromium")
    p.add_argument("site", type=Path)
    p.add_argument("--runs", type=int, default=3)
    args = p.parse_args()
    print(json.dumps(measure(args.site, args.runs), indent=1))


if __name__ == "__main__":
    main()
