"""``envelope space`` and the space section of ``envelope check`` through click's CliRunner."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
from click.testing import CliRunner

from envelope.cli import main
from envelope.demo import demo_cell_path
from envelope.errors import EXIT_BAD_INPUT, EXIT_CLEAR, EXIT_FINDING

DATA = Path(__file__).parent / "data"
CELL_FILE = DATA / "space-cell.toml"


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _soft_cell(tmp_path: Path, limits_deg) -> Path:
    text = CELL_FILE.read_text()
    blocks = text.split("[[arm.joints]]\n")
    for j, (lo, hi) in enumerate(limits_deg):
        blocks[j + 1] = blocks[j + 1].replace("max = ", f"soft_min = {float(lo)!r}\nsoft_max = {float(hi)!r}\nmax = ", 1)
    path = tmp_path / "soft.toml"
    path.write_text("[[arm.joints]]\n".join(blocks))
    return path


def test_space_command_finds_the_fence_and_suggests_limits(tmp_path):
    out = tmp_path / "out"
    res = _run("space", CELL_FILE, "--out", out, "--pitch", 40)
    assert res.exit_code == EXIT_FINDING, res.output
    assert "0/1 fence panels pass" in res.output
    assert "panel north fence/panel 1: fail: reaching over" in res.output
    assert "suggested axis limits: set joint 1" in res.output
    for name in ("maximum-space.stl", "maximum-space.glb", "restricted-space.stl", "restricted-space.glb",
                 "operating-space.stl", "operating-space.glb", "fences.csv", "crushing.csv", "space.json"):
        assert (out / name).is_file(), name
    rows = list(csv.DictReader((out / "fences.csv").open()))
    assert [r["verdict"] for r in rows] == ["fail"]
    summary = json.loads((out / "space.json").read_text())
    assert summary["pitch_mm"] == 40.0 and summary["suggestion"]["found"]

    # the suggested limits, set as soft limits, pass: exit 0
    limits = np.array(summary["suggestion"]["limits_deg"])[:3]
    res2 = _run("space", _soft_cell(tmp_path, limits), "--out", tmp_path / "out2", "--pitch", 40)
    assert res2.exit_code == EXIT_CLEAR, res2.output
    assert "1/1 fence panels pass" in res2.output and "soft limits" in res2.output


def test_space_command_bad_input(tmp_path):
    res = CliRunner().invoke(main, ["space", str(tmp_path / "missing.toml")])
    assert res.exit_code == EXIT_BAD_INPUT
    assert "envelope: error:" in res.output and "cell file not found" in res.output and "Traceback" not in res.output
    res = CliRunner().invoke(main, ["space", str(CELL_FILE), "--risk", "medium"])
    assert res.exit_code == EXIT_BAD_INPUT and "'medium' is not one of 'high', 'low'" in res.output
    res = CliRunner().invoke(main, ["space", str(CELL_FILE), "--pitch", "0"])
    assert res.exit_code == EXIT_BAD_INPUT
    bad = tmp_path / "bad.toml"
    bad.write_text(CELL_FILE.read_text().replace("max = 170\n", "max = 170\nsoft_max = 175\n", 1))
    res = CliRunner().invoke(main, ["space", str(bad)])
    assert res.exit_code == EXIT_BAD_INPUT
    assert "joint 1: soft limit 'soft_max' 175 is above the mechanical 'max' 170" in res.output


def test_space_command_help_carries_the_caution():
    res = _run("space", "--help")
    assert res.exit_code == 0 and "CAUTION" in res.output and "--pitch" in res.output


def test_demo_through_space(tmp_path):
    res = _run("space", demo_cell_path(), "--out", tmp_path, "--pitch", 100)
    assert res.exit_code == EXIT_FINDING, res.output
    rows = list(csv.DictReader((tmp_path / "fences.csv").open()))
    assert len(rows) == 7 and {r["zone"] for r in rows} == {"north fence", "fence door", "south fence"}
    assert all(r["confidence"] == "U" and r["risk"] == "high" for r in rows)
    crushing = list(csv.DictReader((tmp_path / "crushing.csv").open()))
    assert crushing and all(float(r["gap_mm"]) < float(r["minimum_mm"]) for r in crushing)
    assert "no suggested axis limits" in res.output


def test_demo_through_check_includes_the_space(tmp_path):
    res = _run("check", demo_cell_path(), "--out", tmp_path, "--pitch", 100)
    assert res.exit_code == EXIT_FINDING, res.output
    assert "fence panels pass" in res.output
    data = json.loads((tmp_path / "clearance.json").read_text())
    assert "space" in data and len(data["space"]["panels"]) == 7
    html = (tmp_path / "report.html").read_text()
    assert "Spaces, fences and protective devices" in html
    assert "from memory and unverified" in html
    assert "restricted space" in html  # the outline's caption
    assert (tmp_path / "restricted-space.stl").is_file() and (tmp_path / "fences.csv").is_file()
    pdf = (tmp_path / "report.pdf").read_bytes()
    assert pdf.startswith(b"%PDF")
