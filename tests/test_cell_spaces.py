"""Cell-file keys for the space check: soft axis limits, protective devices and the ISO 13857 risk level."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from envelope import cell as cellmod
from envelope.cell import load_cell
from envelope.errors import CellFileError

DATA = Path(__file__).parent / "data"
MINIMAL = (DATA / "minimal-cell.toml").read_text()
DOC = (Path(__file__).resolve().parents[1] / "docs" / "cell-file.md").read_text()

JOINT2 = "offset = -90\nmin = -80\nmax = 145\n"
"""Joint 2 of the minimal cell (the only joint with offset = -90)."""


def write(tmp_path, top="", tail="", base=MINIMAL) -> Path:
    path = tmp_path / "cell.toml"
    path.write_text(top + "\n" + base + "\n" + tail)
    return path


def with_joint2(extra: str) -> str:
    assert MINIMAL.count(JOINT2) == 1
    return MINIMAL.replace(JOINT2, JOINT2 + extra)


DEVICE = '''
[[devices]]
name = "curtain"
kind = "perpendicular"
response_time = 0.02
stopping_time = 0.3
detection_capability = 30
points = [[1000, -500], [1000, 500]]
'''


# ---------------------------------------------------------------------- soft limits
def test_soft_limits_default_to_the_mechanical_limits(tmp_path):
    cell = load_cell(write(tmp_path))
    soft = cell.settings["soft_limits"]
    assert soft.shape == (6, 2) and soft.dtype == np.float64
    np.testing.assert_array_equal(soft, cell.arm.limits)
    assert cell.settings["soft_limit_joints"] == ()
    assert not soft.flags.writeable


def test_soft_limits_are_read_in_file_units(tmp_path):
    cell = load_cell(write(tmp_path, base=with_joint2("soft_min = -30\nsoft_max = 90.5\n")))
    soft = cell.settings["soft_limits"]
    # 1 deg = pi / 180 rad (definition of the degree)
    assert soft[1, 0] == pytest.approx(-30 * math.pi / 180, abs=1e-15)
    assert soft[1, 1] == pytest.approx(90.5 * math.pi / 180, abs=1e-15)
    np.testing.assert_array_equal(soft[[0, 2, 3, 4, 5]], cell.arm.limits[[0, 2, 3, 4, 5]])
    assert cell.settings["soft_limit_joints"] == (2,)


def test_one_soft_limit_keeps_the_other_side_mechanical(tmp_path):
    cell = load_cell(write(tmp_path, base=with_joint2("soft_max = 100\n")))
    soft = cell.settings["soft_limits"]
    assert soft[1, 0] == cell.arm.limits[1, 0]
    assert soft[1, 1] == pytest.approx(math.radians(100), abs=1e-15)


@pytest.mark.parametrize(
    "extra, message",
    [
        ("soft_min = -90\n", r"joint 2: soft limit 'soft_min' -90 is below the mechanical 'min' -80 \(deg\)"),
        ("soft_max = 150\n", r"joint 2: soft limit 'soft_max' 150 is above the mechanical 'max' 145 \(deg\)"),
        ("soft_min = 40\nsoft_max = 20\n", r"joint 2: soft limit 'soft_min' 40 must be below 'soft_max' 20"),
        ("soft_min = 20\nsoft_max = 20\n", r"joint 2: soft limit 'soft_min' 20 must be below 'soft_max' 20"),
        ('soft_min = "ten"\n', r"joint 2: key 'soft_min' must be a number, got a string 'ten'"),
    ],
)
def test_bad_soft_limits_name_the_joint(tmp_path, extra, message):
    with pytest.raises(CellFileError, match=r"cell\.toml: \[\[arm\.joints\]\] " + message):
        load_cell(write(tmp_path, base=with_joint2(extra)))


def test_soft_limits_in_radians_when_the_file_says_rad(tmp_path):
    base = MINIMAL.replace(JOINT2, "offset = -1.5707963267948966\nmin = -1.3\nmax = 2.5\nsoft_max = 2.0\n")
    base = re.sub(r"min = (-?\d+)\nmax = (-?\d+)", lambda m: f"min = {math.radians(float(m[1]))!r}\n"
                  f"max = {math.radians(float(m[2]))!r}", base)
    cell = load_cell(write(tmp_path, top='angle_units = "rad"', base=base))
    assert cell.settings["soft_limits"][1, 1] == 2.0


# ---------------------------------------------------------------------- risk
def test_risk_defaults_to_high_and_reads_low(tmp_path):
    assert load_cell(write(tmp_path)).settings["risk"] == "high"
    assert load_cell(write(tmp_path, top='risk = "low"')).settings["risk"] == "low"


def test_bad_risk_is_an_error_with_a_suggestion(tmp_path):
    with pytest.raises(CellFileError, match=r"top level: key 'risk' must be one of 'high', 'low', got 'hihg' "
                                            r"\(did you mean 'high'\?\)"):
        load_cell(write(tmp_path, top='risk = "hihg"'))


# ---------------------------------------------------------------------- devices
def test_no_devices_by_default(tmp_path):
    assert load_cell(write(tmp_path)).devices == ()


def test_a_device_is_read_in_metres_and_seconds(tmp_path):
    cell = load_cell(write(tmp_path, tail=DEVICE))
    (dev,) = cell.devices
    assert (dev.name, dev.kind) == ("curtain", "perpendicular")
    assert dev.response_time == 0.02 and dev.stopping_time == 0.3
    assert dev.total_time == pytest.approx(0.32, abs=1e-15)
    assert dev.detection_capability == pytest.approx(0.030, abs=1e-15)
    np.testing.assert_allclose(dev.points, [[1.0, -0.5], [1.0, 0.5]], atol=1e-15)
    assert dev.source == "cell.toml [[devices]] 1"


def test_a_beam_device_needs_no_detection_capability(tmp_path):
    tail = DEVICE.replace("perpendicular", "multi-beam").replace("detection_capability = 30\n", "")
    (dev,) = load_cell(write(tmp_path, tail=tail)).devices
    assert dev.kind == "multi-beam" and dev.detection_capability is None


@pytest.mark.parametrize(
    "change, message",
    [
        (("detection_capability = 30\n", ""), r"missing key 'detection_capability'.*'perpendicular' needs it"),
        (("detection_capability = 30", "detection_capability = 90"),
         r"not a valid ISO 13855 device: expected a detection capability 0 < d <= 70 mm.*got 90 mm"),
        (('"perpendicular"', '"single-beam"'),
         r"key 'detection_capability' applies to kind 'perpendicular' only, got it for 'single-beam'"),
        (('"perpendicular"', '"perpendiculr"'), r"key 'kind' must be one of .*did you mean 'perpendicular'"),
        (("stopping_time = 0.3", "stopping_time = -0.3"), r"key 'stopping_time' must be >= 0, got -0.3"),
        (("response_time = 0.02\n", ""), r"missing key 'response_time' \(a number\)"),
        (("points = [[1000, -500], [1000, 500]]", "points = [[1000, -500]]"),
         r"key 'points' needs at least 2 points, got 1"),
        (("points = [[1000, -500], [1000, 500]]", "points = [[1000, -500], [1000, -500]]"),
         r"key 'points' has two equal consecutive points"),
        (("points = [[1000, -500], [1000, 500]]", "points = [[1000, -500, 0], [1000, 500, 0]]"),
         r"key 'points' must be a list of points, each a list of 2 numbers"),
        (("name = \"curtain\"\n", "name = \"curtain\"\nheight = 5\n"), r"unknown key 'height'"),
    ],
)
def test_bad_devices_name_the_device(tmp_path, change, message):
    old, new = change
    assert DEVICE.count(old) == 1
    with pytest.raises(CellFileError, match=r'cell\.toml: device "curtain": ' + message):
        load_cell(write(tmp_path, tail=DEVICE.replace(old, new)))


def test_two_devices_with_one_name(tmp_path):
    with pytest.raises(CellFileError, match=r'device "curtain": two devices have this name'):
        load_cell(write(tmp_path, tail=DEVICE + DEVICE))


def test_the_new_keys_are_documented():
    words = set(re.findall(r"`\"?([a-z0-9_\-]+)\"?`", DOC))
    keys = set(cellmod.DEVICE_KEYS) | set(cellmod.DEVICE_KINDS) | {"soft_min", "soft_max", "risk", "devices"}
    assert sorted(k for k in keys if k not in words) == []
    assert "## Protective devices" in DOC
