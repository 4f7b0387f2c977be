"""The least work any publisher of the same channel pages must do, single process.

For every channel file: read it, split off and parse its TOML header with tomllib, render its
Markdown notes (the same extensions the site uses) and sanitise them with nh3, fill one small
jinja2 template, write the page.  The scale benchmark times this beside specfold.

    python -m tests.bench.baseline SPECS OUT
"""

from __future__ import annotations

import sys
import tomllib
from pathlib import Path

import jinja2
import markdown
import nh3
from markupsafe import Markup

TEMPLATE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{{ id }}: {{ title }}</title></head>
<body><h1>{{ id }}: {{ title }}</h1>
<pre>{{ header }}</pre>
<dl>{% for k, v in fields %}<dt>{{ k }}</dt><dd>{{ v }}</dd>{% endfor %}</dl>
<section>{{ notes }}</section>
</body></html>
"""


def publish(specs: Path, out: Path) -> int:
    env = jinja2.Environment(autoescape=True)
    template = env.from_string(TEMPLATE)
    md = markdown.Markdown(extensions=["tables", "fenced_code", "sane_lists"], output_format="html")
    (out / "channels").mkdir(parents=True, exist_ok=True)
    n = 0
    for path in sorted((specs / "channels").rglob("*.md")):
        text = path.read_text(encoding="utf-8")
        _, header, body = text.split("+++", 2)
        data = tomllib.loads(header)
        notes = nh3.clean(md.reset().convert(body))
        fields = [(k, v) for k, v in data.items() if not isinstance(v, dict | list)]
        page = template.render(id=path.stem, title=data.get("title", ""), header=header.strip("\n"),
                               fields=fields, notes=Markup(notes))
        (out / "channels" / f"{path.stem}.html").write_text(page, encoding="utf-8")
        n += 1
    return n


if __name__ == "__main__":
    publish(Path(sys.argv[1]), Path(sys.argv[2]))
