"""`envelope map` through click's CliRunner: files, the summary, resume, bad input."""

import numpy as np
from click.testing import CliRunner

from envelope.cli import main
from envelope.demo import demo_cell_path

ARGS = ["--region", "-200:900,-600:600,613:613", "--step", "100", "--point", "500,0,613", "--chunk", "16"]


def test_map_writes_files_and_resumes(tmp_path):
    out = tmp_path / "map"
    runner = CliRunner()
    first = runner.invoke(main, ["map", str(demo_cell_path()), *ARGS, "--out", str(out)])
    assert first.exit_code == 0, first.output
    assert "reachable and clear" in first.output and "largest clear box" in first.output
    for name in ("map.npz", "map-plan.png", "map-elevation.png", "map-summary.json"):
        assert (out / name).stat().st_size > 0, name
    with np.load(out / "map.npz") as data:
        counts = data["n_clear"].copy()
        assert counts.shape[1:] == (12, 13, 1)
    # a second run reuses every finished chunk and writes the same arrays
    chunk_files = sorted(p.name for p in (out / "chunks").iterdir())
    assert chunk_files
    second = runner.invoke(main, ["map", str(demo_cell_path()), *ARGS, "--out", str(out)])
    assert second.exit_code == 0, second.output
    with np.load(out / "map.npz") as data:
        assert np.array_equal(data["n_clear"], counts)


def test_map_bad_step_is_one_line(tmp_path):
    result = CliRunner().invoke(main, ["map", str(demo_cell_path()), "--region", "0:100,0:100,500:500",
                                       "--step", "0", "--out", str(tmp_path)])
    assert result.exit_code == 2
    lines = [l for l in result.output.splitlines() if l.strip()]
    assert len(lines) == 1 and "--step" in lines[0]
