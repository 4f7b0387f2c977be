"""The scale benchmark: check, full build, no-op and one-channel rebuilds against a baseline.

    python -m tests.bench.run --sizes 100 1000 10000 [--runs 3] [--work DIR] [--json FILE]

For each size N a synthetic tree is written (:mod:`tests.bench.synth`), then every figure is the
median wall time of ``--runs`` runs of a child process (each started after ``os.sync()``, so the
write-back of a previous build's hundreds of megabytes does not land in the next one's time):

baseline     the least work any publisher of the same channel pages must do (:mod:`tests.bench.baseline`)
check        ``specfold check`` (text report to /dev/null)
build        ``specfold build`` into an empty folder with no cache
noop         ``specfold build`` again, nothing changed
one_channel  ``specfold build`` after appending a sentence to one channel's notes
one_param    ``specfold build`` after moving one channel's band edge (its filter figures change)

Peak resident memory is the largest maximum RSS of the full builds (``/usr/bin/time -f %M``, or
``getrusage(RUSAGE_CHILDREN)`` in a wrapper where that tool is missing).  Site size (without the
build cache, reported apart) and the median channel page size are read from the built folder.
Every figure is printed with its ratio to the baseline (rebuilds also against the full build) and
written as JSON.

The built overview is then opened in headless Chromium (:mod:`tests.bench.overview`): its open
time (navigation start to the table laid out) and the median latency of a filter keystroke, in
milliseconds, under ``overview`` in the JSON (null where Chromium or Playwright is missing).
Last, the live preview is started on that site (:mod:`tests.bench.preview`) and the time from
saving a note edit to the served page showing it is reported under ``preview``.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from . import overview, preview
from .synth import write_system

ROOT = Path(__file__).resolve().parents[2]
TIME = Path("/usr/bin/time")


def _run(args: list[str], mem_file: Path | None = None) -> tuple[float, int]:
    """Run one child from the repository root; returns (wall seconds, peak RSS in KiB or 0)."""
    cmd = [sys.executable, *args]
    os.sync()  # the previous run's writes flushed first: their write-back would slow this run's reads
    if mem_file is not None and TIME.exists():
        cmd = [str(TIME), "-f", "%M", "-o", str(mem_file), *cmd]
    start = time.perf_counter()
    subprocess.run(cmd, cwd=ROOT, check=False, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                   env={**os.environ, "PYTHONHASHSEED": "0"})
    wall = time.perf_counter() - start
    rss = 0
    if mem_file is not None and mem_file.exists():
        rss = int(mem_file.read_text().split()[-1])
    return wall, rss


def _clean(out: Path, cache: Path) -> None:
    shutil.rmtree(out, ignore_errors=True)
    shutil.rmtree(cache, ignore_errors=True)


def _sizes(out: Path, cache_dir: Path) -> tuple[int, int, int]:
    """Bytes of the published site, bytes of the build cache (beside it), median channel page bytes."""
    total = sum(p.stat().st_size for p in out.rglob("*") if p.is_file())
    cache = sum(p.stat().st_size for p in cache_dir.rglob("*") if p.is_file())
    pages = sorted(p.stat().st_size for p in (out / "channels").glob("*.html"))
    return total, cache, int(statistics.median(pages)) if pages else 0


BAND = re.compile(r'^(band = \[".*?", ")([0-9.]+)( kHz"\])$', re.MULTILINE)


def _move_band_edge(path: Path) -> None:
    """Lower the top of the channel's band by 0.1 kHz per run: its least orders, droop and aliases change."""
    text = path.read_text(encoding="utf-8")
    edge = BAND.search(text)
    if edge is None:
        raise SystemExit(f"{path}: no band in kHz to move")
    top = float(edge.group(2)) - 0.1
    path.write_text(BAND.sub(lambda m: f"{m.group(1)}{top:.1f}{m.group(3)}", text, count=1), encoding="utf-8")


def measure(n: int, runs: int, work: Path, shape: str = "mix") -> dict[str, Any]:
    specs = write_system(n, work / f"specs-{n}-{shape}", shared_link=shape == "shared")
    site_dir = work / f"site-{n}-{shape}" / "out"
    cache = work / f"cache-{n}-{shape}"
    flags = ["--cache", str(cache)]
    site_dir.parent.mkdir(parents=True, exist_ok=True)
    base_out = work / f"baseline-{n}"
    mem = work / "rss.txt"
    times: dict[str, list[float]] = {k: [] for k in ("baseline", "check_cold", "check", "build", "noop",
                                                     "one_channel", "one_param")}
    peak = 0
    first = subprocess.run([sys.executable, "-m", "generator", "check", str(specs), "--fail-on", "never",
                            "--cache", "off"], cwd=ROOT, capture_output=True, text=True, check=False)
    if first.returncode != 0:
        raise SystemExit(f"the synthetic tree of {n} channels does not check:\n{first.stderr[-2000:]}")
    files = sorted((specs / "channels").rglob("*.md"))
    edited = files[n // 2]
    moved = next(p for p in files[n // 3:] if p.name.startswith("ACC-GEN-DE-"))
    for i in range(runs):
        shutil.rmtree(base_out, ignore_errors=True)
        times["baseline"].append(_run(["-m", "tests.bench.baseline", str(specs), str(base_out)])[0])
        _clean(site_dir, cache)
        check = ["-m", "generator", "check", str(specs), "--fail-on", "never", *flags]
        times["check_cold"].append(_run(check)[0])
        times["check"].append(_run(check)[0])  # with the cache the cold run filled
        _clean(site_dir, cache)
        build = ["-m", "generator", "build", str(specs), "-o", str(site_dir), *flags]
        wall, rss = _run(build, mem)
        times["build"].append(wall)
        peak = max(peak, rss)
        times["noop"].append(_run(build)[0])
        with edited.open("a", encoding="utf-8") as fh:
            fh.write(f"\nEdited for benchmark run {i}.\n")
        times["one_channel"].append(_run(build)[0])
        _move_band_edge(moved)
        times["one_param"].append(_run(build)[0])
    site_bytes, cache_bytes, page_median = _sizes(site_dir, cache)
    browser = overview.measure(site_dir, runs) if shape == "mix" else None
    served = preview.measure(specs, site_dir, runs) if shape == "mix" else None
    shutil.rmtree(base_out, ignore_errors=True)
    med = {k: statistics.median(v) for k, v in times.items()}
    base = med["baseline"]
    return {
        "channels": n,
        "shape": shape,
        "runs": runs,
        "seconds": {k: round(v, 3) for k, v in med.items()},
        "all_seconds": {k: [round(x, 3) for x in v] for k, v in times.items()},
        "ratio_to_baseline": {k: round(v / base, 3) for k, v in med.items() if k != "baseline"},
        "ratio_to_build": {k: round(med[k] / med["build"], 3) for k in ("noop", "one_channel", "one_param")},
        "peak_rss_mb": round(peak / 1024, 1),
        "site_mb": round(site_bytes / 1e6, 2),
        "cache_mb": round(cache_bytes / 1e6, 2),
        "median_channel_page_kb": round(page_median / 1000, 1),
        "overview": browser,
        "preview": served,
    }


def _print(r: dict[str, Any]) -> None:
    s, rb, rf = r["seconds"], r["ratio_to_baseline"], r["ratio_to_build"]
    print(f"N = {r['channels']}, {r['shape']} ({r['runs']} runs, medians)")
    print(f"  baseline      {s['baseline']:8.2f} s")
    for k in ("check_cold", "check", "build", "noop", "one_channel", "one_param"):
        extra = f"   {rf[k]:.3f} x build" if k in rf else ""
        print(f"  {k:<12}  {s[k]:8.2f} s   {rb[k]:.3f} x baseline{extra}")
    print(f"  peak RSS {r['peak_rss_mb']} MB; site {r['site_mb']} MB (cache {r['cache_mb']} MB); median channel page "
          f"{r['median_channel_page_kb']} KB")
    o = r["overview"]
    if o is None:
        print("  overview page: not measured (no Chromium or Playwright)")
    else:
        print(f"  overview page: opens in {o['open_ms']:.0f} ms; filter keystroke {o['keystroke_ms']:.1f} ms median, "
              f"{o['keystroke_ms_max']:.1f} ms worst")


    v = r["preview"]
    if v is not None:
        print(f"  live preview: an edit shows in {v['edit_shown_s']:.2f} s median, {v['edit_shown_s_max']:.2f} s worst")


def main() -> None:
    p = argparse.ArgumentParser(description="specfold scale benchmark")
    p.add_argument("--sizes", type=int, nargs="+", default=[100, 1000])
    p.add_argument("--runs", type=int, default=3)
    p.add_argument("--work", type=Path, default=None, help="scratch folder (default: a temporary one, removed)")
    p.add_argument("--json", type=Path, default=Path("test-artifacts/bench.json"))
    p.add_argument("--shapes", nargs="+", choices=("mix", "shared"), default=["mix", "shared"],
                   help="mix: the demo's mix of findings (a few percent of channels flagged); shared: every "
                        "channel on one link over capacity, so one finding names them all")
    args = p.parse_args()
    work = args.work or Path(tempfile.mkdtemp(prefix="specfold-bench-"))
    results = []
    try:
        for n in args.sizes:
            for shape in args.shapes:
                r = measure(n, args.runs, work, shape)
                _print(r)
                results.append(r)
            args.json.parent.mkdir(parents=True, exist_ok=True)
            args.json.write_text(json.dumps({"results": results}, indent=1) + "\n", encoding="utf-8")
    finally:
        if args.work is None:
            shutil.rmtree(work, ignore_errors=True)
    print(f"wrote {args.json}")


if __name__ == "__main__":
    main()
