"""A synthetic spec tree of N channels for the scale benchmark.

The demo rig in ``specs/`` is one "bay" of 17 channels (delta-sigma, SAR and DAC channels,
a camera, groups, interference tones, waivers, cautions).  A synthetic system repeats the
bay: bay ``b`` gets its own converters (``adc-ds-b``, ``adc-sar-b``, ``dac-out-b``), its own
link and recorder, its own groups, and channels named ``<demo id>-<b>``.  Titles, tags and
notes vary per channel (each note gets a few hundred words with a list and a calibration
table), so pages differ as they would in a real programme; the numbers stay those of the
demo, so every tree loads, and budgets per bay are those of the demo rig.

    python -m tests.bench.synth 1000 /tmp/synth-1000
"""

from __future__ import annotations

import argparse
import random
import re
import shutil
from pathlib import Path

DEMO = Path(__file__).resolve().parents[2] / "specs"
BAY = 17

_WORD_TEXT = (
    "housing bearing shaft mount cable screen connector gland junction sensor amplifier "
    "calibration offset drift temperature humidity vibration fatigue inspection torque "
    "clamp bracket pad stud thread epoxy grounding isolation reference phase gain range "
    "record campaign trial sweep step ramp dwell baseline commissioning acceptance"
)
_WORDS = _WORD_TEXT.split()


def _sentence(rng: random.Random, n: int) -> str:
    words = [rng.choice(_WORDS) for _ in range(n)]
    return words[0].capitalize() + " " + " ".join(words[1:]) + "."


def _extra_notes(rng: random.Random, cid: str, bay: int) -> str:
    """About 200 more words: a paragraph, a list and a calibration table."""
    para = " ".join(_sentence(rng, rng.randint(8, 16)) for _ in range(6))
    items = "\n".join(f"- {_sentence(rng, rng.randint(6, 12))}" for _ in range(rng.randint(3, 6)))
    rows = "\n".join(
        f"| {2026 - k} | {rng.uniform(0.97, 1.03):.4f} | {rng.uniform(-0.5, 0.5):+.3f} | {rng.choice(_WORDS)} |"
        for k in range(rng.randint(3, 6))
    )
    return (f"\n\n## Installation record, bay {bay}\n\n{para}\n\nChecks before each campaign on `{cid}`:\n\n"
            f"{items}\n\n| year | gain factor | offset (% FS) | remark |\n|---|---|---|---|\n{rows}\n")


def _system(bays: int) -> str:
    text = (DEMO / "system.toml").read_text(encoding="utf-8")
    head, _, rest = text.partition("# ----------------------------------------------------------- converters")
    head = head.replace('name = "Skerry Sound test unit"', f'name = "Synthetic rig, {bays} bays"')
    blocks = re.split(r"\n(?=\[)", "[" + rest.split("\n[", 1)[1])
    out = [head]
    # comments once, in the head: system.toml must stay under the loader's size limit at 10,000 channels
    blocks = ["\n".join(ln for ln in blk.split("\n") if not ln.lstrip().startswith("#")) for blk in blocks]
    for b in range(bays):
        for block in blocks:
            block = re.sub(r"^\[(converters|links|stores|groups)\.([a-z0-9-]+)\]",
                           lambda m, b=b: f"[{m.group(1)}.{m.group(2)}-{b}]", block)
            block = re.sub(r'^(link|store) = "([a-z0-9-]+)"', lambda m, b=b: f'{m.group(1)} = "{m.group(2)}-{b}"',
                           block, flags=re.M)
            out.append(block.rstrip("\n") + "\n\n")
    return "".join(out)


def _channel(text: str, cid: str, bay: int, rng: random.Random) -> str:
    text = re.sub(r'^(converter|link|match) = "([a-z0-9-]+)"', lambda m: f'{m.group(1)} = "{m.group(2)}-{bay}"',
                  text, count=0, flags=re.M)
    text = re.sub(r'^title = "(.*)"', lambda m: f'title = "{m.group(1)}, bay {bay}"', text, count=1, flags=re.M)
    text = re.sub(r'^tags = \[(.*)\]', lambda m: f'tags = [{m.group(1)}, "bay-{bay}"]', text, count=1, flags=re.M)
    return text.rstrip("\n") + _extra_notes(rng, cid, bay)


def write_system(n: int, root: Path, shared_link: bool = False) -> Path:
    """Write a spec tree of ``n`` channels into ``root`` (replaced); returns ``root``.  With
    ``shared_link`` every channel is routed over bay 0's link, which cannot carry them all: one
    link-capacity finding names every channel on it (the worst case for anything per finding x channel)."""
    if root.exists():
        shutil.rmtree(root)
    (root / "channels").mkdir(parents=True)
    templates = sorted((DEMO / "channels").glob("*.md"))
    bays = -(-n // BAY)
    (root / "system.toml").write_text(_system(bays), encoding="utf-8")
    rng = random.Random(n)
    for i in range(n):
        bay, template = divmod(i, BAY)
        src = templates[template]
        cid = f"{src.stem}-{bay}"
        folder = root / "channels" / f"bay-{bay:04d}"
        folder.mkdir(exist_ok=True)
        text = _channel(src.read_text(encoding="utf-8"), cid, bay, rng)
        if shared_link:
            if re.search(r'^link = "[a-z0-9-]+"$', text, flags=re.M):
                text = re.sub(r'^link = "[a-z0-9-]+"$', 'link = "net0-0"', text, count=1, flags=re.M)
            else:
                text = text.replace("[conversion]\n", '[conversion]\nlink = "net0-0"\n', 1)
        (folder / f"{cid}.md").write_text(text, encoding="utf-8")
    return root


def main() -> None:
    p = argparse.ArgumentParser(description="write a synthetic spec tree of N channels")
    p.add_argument("n", type=int)
    p.add_argument("folder", type=Path)
    args = p.parse_args()
    write_system(args.n, args.folder)
    print(f"wrote {args.n} channels into {args.folder}")


if __name__ == "__main__":
    main()
