"""The `envelope` command end to end through click's CliRunner: exit codes, files, determinism, errors."""

import csv
import json
import re
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from envelope import __version__
from envelope.cli import main
from envelope.demo import demo_cell_path

EXPECTED_FILES = ("clearance.csv", "clearance.json", "report.html", "report.pdf")


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    result = CliRunner().invoke(main, ["check", str(demo_cell_path()), "--out", str(out)])
    return result, out


@pytest.fixture()
def demo_copy(tmp_path):
    """A writable copy of the demo cell folder (meshes copied as files)."""
    folder = tmp_path / "cell"
    shutil.copytree(demo_cell_path().parent, folder, symlinks=False, ignore=shutil.ignore_patterns("__*"))
    return folder / "cell.toml"


def test_version():
    result = CliRunner().invoke(main, ["--version"])
    assert result.exit_code == 0 and __version__ in result.output


def test_check_demo_writes_every_file(demo_run):
    result, out = demo_run
    assert result.exit_code == 1, result.output  # the demo is designed to show findings
    assert "verdict:" in result.output
    for name in EXPECTED_FILES:
        assert (out / name).stat().st_size > 0, name
    assert list(out.glob("*.glb"))
    with open(out / "clearance.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert rows and {"target", "branch", "status", "clearance_mm", "required_mm", "margin_mm"} <= set(rows[0])
    data = json.loads((out / "clearance.json").read_text())
    assert data["verdict"] == "intrusion" or data["verdict"] in ("below margin", "outside limits", "unreachable")
    html = (out / "report.html").read_text()
    assert "risk assessment" in html.lower() and data["verdict"].upper() in html.upper()


def test_check_is_deterministic_and_jobs_do_not_change_results(demo_run, tmp_path):
    _, out1 = demo_run
    out2 = tmp_path / "jobs2"
    result = CliRunner().invoke(main, ["check", str(demo_cell_path()), "--out", str(out2), "--jobs", "2"])
    assert result.exit_code == 1, result.output
    for name in ("clearance.csv", "clearance.json"):
        assert (out1 / name).read_bytes() == (out2 / name).read_bytes(), name


def test_check_json_summary(tmp_path):
    result = CliRunner().invoke(main, ["check", str(demo_cell_path()), "--out", str(tmp_path), "--json"])
    summary = json.loads(result.output)
    assert summary["exit_code"] == result.exit_code == 1
    assert Path(summary["files"]["report.html"]).exists()


def test_check_help_carries_the_caution():
    result = CliRunner().invoke(main, ["check", "--help"])
    text = " ".join(result.output.split())
    assert "does not replace the risk assessment" in text and "take precedence" in text


def test_solve_human_and_json():
    runner = CliRunner()
    result = runner.invoke(main, ["solve", str(demo_cell_path()), "--pose", "600 0 500 180 0 0"])
    assert result.exit_code == 0, result.output
    assert "front-up-pos" in result.output and "closed-form" in result.output
    result = runner.invoke(main, ["solve", str(demo_cell_path()), "--pose", "600 0 500 180 0 0", "--json"])
    table = json.loads(result.output)
    assert table["complete"] and len(table["branches"]) >= 8


def test_solve_bad_pose_is_one_line():
    result = CliRunner().invoke(main, ["solve", str(demo_cell_path()), "--pose", "1 2 3"])
    assert result.exit_code == 2
    assert result.output.strip().count("\n") == 0 and "--pose" in result.output


def test_demo_and_init(tmp_path):
    runner = CliRunner()
    result = runner.invoke(main, ["demo", "--out", str(tmp_path / "demo")])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "demo" / "report.html").exists() and "report:" in result.output
    result = runner.invoke(main, ["init", str(tmp_path / "starter")])
    assert result.exit_code == 0, result.output
    starter = tmp_path / "starter" / "cell.toml"
    assert starter.exists()
    # The starter cell is a valid cell: checking it gives a verdict (0 or 1), not bad input.
    result = runner.invoke(main, ["check", str(starter), "--out", str(tmp_path / "starter-out")])
    assert result.exit_code in (0, 1), result.output
    # init refuses to overwrite.
    result = runner.invoke(main, ["init", str(tmp_path / "starter")])
    assert result.exit_code == 2


def _one_line_error(result, *needles):
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [l for l in result.output.splitlines() if l.strip()]
    assert len(lines) == 1, result.output
    for needle in needles:
        assert re.search(needle, lines[0]), (needle, lines[0])


def test_bad_input_missing_mesh(demo_copy):
    mesh = next((demo_copy.parent / "meshes").glob("demo-link2.stl"))
    mesh.unlink()
    result = CliRunner().invoke(main, ["check", str(demo_copy), "--out", str(demo_copy.parent / "o")])
    _one_line_error(result, "cell.toml", "demo-link2.stl")


def test_bad_input_typo_key(demo_copy):
    text = demo_copy.read_text().replace("self_clearance =", "self_clearence =", 1)
    demo_copy.write_text(text)
    result = CliRunner().invoke(main, ["check", str(demo_copy), "--out", str(demo_copy.parent / "o")])
    _one_line_error(result, "cell.toml", "self_clearence", "did you mean")


def test_bad_input_non_orthonormal_target(demo_copy):
    extra = (
        '\n[[targets]]\nname = "skewed"\nmatrix = [[1, 0.1, 0, 500], [0, 1, 0, 0], [0, 0, 1, 500], [0, 0, 0, 1]]\n'
    )
    demo_copy.write_text(demo_copy.read_text() + extra)
    result = CliRunner().invoke(main, ["check", str(demo_copy), "--out", str(demo_copy.parent / "o")])
    _one_line_error(result, "cell.toml", "skewed", "orthonormal")


def test_bad_input_csv_row(demo_copy):
    csv_path = demo_copy.parent / "targets.csv"
    lines = csv_path.read_text().splitlines()
    lines.append("broken,world,100,abc,500,fixed-xyz,180,0,0,,,,")
    csv_path.write_text("\n".join(lines) + "\n")
    result = CliRunner().invoke(main, ["check", str(demo_copy), "--out", str(demo_copy.parent / "o")])
    _one_line_error(result, "targets.csv", rf"row {len(lines)}\b|line {len(lines)}\b", "abc|number")


def test_missing_cell_file(tmp_path):
    result = CliRunner().invoke(main, ["check", str(tmp_path / "nope.toml"), "--out", str(tmp_path / "o")])
    _one_line_error(result, "nope.toml")
