"""Benchmark: the index page of a large folder in Chromium — load, sort, filter.

Builds folders of invented datasets (every dataset tagged alike, so the tag comparison is as large as the
folder), opens each site's index.html in headless Chromium (Playwright, ``/usr/bin/chromium``) and prints:
the time from navigation to every chart drawn, the median time of a sort by each column (click to the next
painted frame), of a text filter and of a tag filter, the page's size and its number of DOM nodes.
Usage: ``python bench/index_browser.py [--datasets 200 1000 5000] [--repeat 3]``.
Goals (issue 18): at 5,000 datasets the index loads in under 2 s and sorts or filters in under 200 ms.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from datasets import make_folder  # type: ignore[import-not-found]  # noqa: E402

CHROMIUM = "/usr/bin/chromium"

_TIMED = """async () => {
  const frame = () => new Promise((done) => requestAnimationFrame(() => setTimeout(done, 0)));
  await frame();
  const start = performance.now();
  ACTION;
  document.body.offsetHeight;
  await frame();
  return performance.now() - start;
}"""


def _measure(page: Any, action: str) -> float:
    """Milliseconds from ``action`` (a JavaScript expression) to the next painted frame. The action is put
    into the function's text: the page's content security policy forbids ``eval``."""
    return float(page.evaluate(_TIMED.replace("ACTION", action)))


def browse(index: Path, repeat: int) -> dict[str, float]:
    from playwright.sync_api import sync_playwright

    out: dict[str, float] = {}
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM)
        try:
            loads = []
            page = None
            for _ in range(repeat):
                if page is not None:
                    page.close()
                page = browser.new_page()
                start = time.perf_counter()
                page.goto(index.as_uri(), wait_until="load")
                page.wait_for_function(
                    "() => Array.from(document.querySelectorAll('.vis')).every(v => v.classList.contains('drawn'))",
                    timeout=120_000,
                )
                loads.append(time.perf_counter() - start)
            assert page is not None
            out["load_s"] = statistics.median(loads)
            out["dom_nodes"] = float(page.evaluate("document.getElementsByTagName('*').length"))
            buttons = page.evaluate("document.querySelectorAll('#datasets thead button').length")
            sorts = []
            for i in range(int(buttons)):
                click = f"document.querySelectorAll('#datasets thead button')[{i}].click()"
                sorts += [_measure(page, click) for _ in range(max(1, repeat - 1))]
            out["sort_ms_median"] = statistics.median(sorts)
            out["sort_ms_max"] = max(sorts)
            text = (
                "(() => { const q = document.querySelector('form.filters input[name=q]');"
                " q.value = q.value ? '' : 'dataset 1'; q.dispatchEvent(new Event('input', {bubbles: true})); })()"
            )
            out["filter_text_ms"] = statistics.median([_measure(page, text) for _ in range(2 * repeat)])
            tag = (
                "(() => { const s = document.querySelector('form.filters select[name=tag]');"
                " s.selectedIndex = s.selectedIndex ? 0 : 1; s.dispatchEvent(new Event('change', {bubbles: true})); })()"
            )
            out["filter_tag_ms"] = statistics.median([_measure(page, tag) for _ in range(2 * repeat)])
        finally:
            browser.close()
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--datasets", type=int, nargs="+", default=[200, 1000, 5000])
    ap.add_argument("--rows", type=int, default=30)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="sitegen-index-"))
    rows = []
    try:
        for count in args.datasets:
            data = make_folder(tmp / f"data-{count}", count, args.rows)
            site = tmp / f"site-{count}"
            start = time.perf_counter()
            subprocess.run([sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "-q"], check=False)
            built = time.perf_counter() - start
            figures = browse(site / "index.html", args.repeat)
            rows.append(
                {
                    "datasets": count,
                    "build_s": round(built, 2),
                    "index_kb": round((site / "index.html").stat().st_size / 1024),
                    **{k: round(v, 3 if k.endswith("_s") else 1) for k, v in figures.items()},
                }
            )
            shutil.rmtree(data)
            shutil.rmtree(site)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    print(json.dumps({"when": time.strftime("%Y-%m-%d %H:%M")}))
    head = list(rows[0]) if rows else []
    print(" | ".join(head))
    for r in rows:
        print(" | ".join(str(r[k]) for k in head))


if __name__ == "__main__":
    main()
