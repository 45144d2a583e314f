"""The documents stay true to the code: every ga setting documented, the README a short guide
that shows the two set-up commands, and the bad-input example it shows is the real output."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.methods.ga.settings import GASettings

ROOT = Path(__file__).resolve().parents[1]


def test_every_ga_setting_is_in_the_methods_reference():
    table = (ROOT / "docs" / "methods.md").read_text(encoding="utf-8")
    for group, settings in GASettings():
        for name in type(settings).model_fields:
            assert f"| {group} | {name} |" in table, f"docs/methods.md lacks {group}.{name}"


def test_readme_is_a_short_guide_with_the_set_up_commands():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "make demo" in readme and "make test" in readme
    assert len(readme.splitlines()) <= 220
    assert "advisory" in readme  # the caution stays


def test_readme_shows_the_real_bad_input_messages():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    result = CliRunner().invoke(app, ["solve", str(ROOT / "examples" / "broken.json")])
    assert result.exit_code == 2
    shown = [line for line in readme.splitlines() if line.startswith("examples/broken.json: ")]
    actual = {line.replace(str(ROOT) + "/", "") for line in result.stderr.splitlines()}
    assert shown and set(shown) <= actual
