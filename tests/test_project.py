"""The project's own promises: README's set-up commands are the ones CI runs; the caution is there."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands():
    text = (ROOT / "README.md").read_text()
    blocks = text.split("```sh\n")[1:]
    return [b.split("```")[0].strip() for b in blocks]


@pytest.mark.skipif(not (ROOT / "README.md").exists(), reason="not a source checkout")
def test_readme_starts_with_the_job_then_two_setup_commands():
    text = (ROOT / "README.md").read_text()
    first_paragraph = text.split("\n\n")[1]
    assert "clearance" in first_paragraph and "branch" in first_paragraph
    commands = _readme_commands()
    assert len(commands) >= 2
    assert "envelope demo" in commands[0] and "pytest" in commands[1]
    assert text.index("envelope demo") < text.index("pytest")


@pytest.mark.skipif(not (ROOT / ".ci" / "run").exists(), reason="not a source checkout")
def test_ci_runs_the_readme_commands():
    ci = (ROOT / ".ci" / "run").read_text()
    install_and_test = _readme_commands()[1]
    assert install_and_test in ci
    demo = _readme_commands()[0].split("&&")[-1].strip().split(" --out")[0]
    assert demo.replace(".venv/bin/", "") in ci.replace(".venv/bin/", "")


@pytest.mark.skipif(not (ROOT / "README.md").exists(), reason="not a source checkout")
def test_readme_carries_the_caution():
    text = " ".join((ROOT / "README.md").read_text().lower().split())
    assert "risk assessment" in text and "take precedence" in text and "stopping" in text
