"""Edit-to-browser latency of the live preview (``specfold serve``) on an already built tree.

    python -m tests.bench.preview SPECS SITE [--runs 3]

Starts :class:`generator.serve.Preview` on SITE (a no-op rebuild when SITE was built from SPECS),
then ``runs`` times appends a marked sentence to one channel's notes and times, from the save to the
moment the served page over HTTP contains the sentence, in seconds.  This is what an author waits
for after saving; the goal for authoring trees (a few hundred channels) is under 2 s.
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
import urllib.request
from pathlib import Path
from typing import Any

from generator.serve import Preview

LIMIT_S = 60.0


def _get(url: str) -> str:
    with urllib.request.urlopen(url, timeout=10) as resp:
        return str(resp.read().decode("utf-8"))


def measure(specs: Path, site: Path, runs: int) -> dict[str, Any]:
    """Median and worst seconds from saving one channel's edit to the served page showing it."""
    channel = sorted((specs / "channels").rglob("*.md"))[0]
    page_url = f"channels/{channel.stem}.html"  # a channel's id is its file name
    preview = Preview(specs, site, port=0)
    port = preview.start()
    seconds = []
    try:
        for i in range(runs):
            marker = f"Preview latency mark {i} {time.time_ns()}."
            with channel.open("a", encoding="utf-8") as fh:
                fh.write(f"\n{marker}\n")
            started = time.perf_counter()
            while marker not in _get(f"http://127.0.0.1:{port}/{page_url}"):
                if time.perf_counter() - started > LIMIT_S:
                    raise SystemExit(f"the preview did not show an edit of {channel} within {LIMIT_S:.0f} s")
                time.sleep(0.02)
            seconds.append(time.perf_counter() - started)
    finally:
        preview.stop()
    return {"edit_shown_s": round(statistics.median(seconds), 3), "edit_shown_s_max": round(max(seconds), 3)}


def main() -> None:
    p = argparse.ArgumentParser(description="specfold preview latency")
    p.add_argument("specs", type=Path)
    p.add_argument("site", type=Path)
    p.add_argument("--runs", type=int, default=3)
    args = p.parse_args()
    print(json.dumps(measure(args.specs, args.site, args.runs)))


if __name__ == "__main__":
    main()
