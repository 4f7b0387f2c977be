"""The README's reference tables match the registries they document."""

from __future__ import annotations

from generator import docs, schema

from .conftest import ROOT


def test_readme_reference_tables_are_current() -> None:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    # regenerate with: python -m generator.docs
    assert docs.sync(text) == text


def test_every_key_is_documented() -> None:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for key in (*schema.CHANNEL_KEYS, *schema.SYSTEM_KEYS):
        assert f"{key.name}`" in text, key.path


def test_readme_test_command_is_what_ci_runs() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    command = "python -m pip install -e '.[test]' && python -m pytest -q"
    assert command in readme and f"\n{command}\n" in ci
    # then, last, the campaigns the quick command leaves out
    assert ci.strip().endswith("python -m pytest -q -m slow") and ci.index(command) < ci.index("-m slow")
