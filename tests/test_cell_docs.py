"""docs/cell-file.md documents every key the loader accepts (and no key it does not)."""

from __future__ import annotations

import re
from pathlib import Path

from envelope import cell, cellshapes
from envelope.geometry import ZONE_KINDS

DOC = (Path(__file__).resolve().parents[1] / "docs" / "cell-file.md").read_text()


def _documented() -> set:
    # every `word` in backticks, and every key of a table header like `[[arm.joints]]` or `[tool.tcp]`
    words = set(re.findall(r"`\"?([a-z0-9_\-]+)\"?`", DOC))
    for header in re.findall(r"`\[\[?([a-z_.]+)", DOC):
        words.update(header.split("."))
    return words


def test_every_accepted_key_is_documented():
    keys = set(cell.TOP_KEYS + cell.ARM_KEYS + cell.JOINT_KEYS + cell.LINK_KEYS + cell.TOOL_KEYS + cell.PAYLOAD_KEYS
               + cell.ZONE_KEYS + cell.TARGET_KEYS + cell.PROGRAM_KEYS + cell.MOVE_KEYS + cell.DEVICE_KEYS
               + cellshapes.POSE_KEYS)
    keys |= {k for ks in cellshapes.SHAPE_KEYS.values() for k in ks}
    keys |= set(cellshapes.SHAPE_KEYS) | set(ZONE_KINDS) | set(cellshapes.OPENING_SHAPES)
    keys |= {"shape", "parts", "parent", "frame", "tcp"}
    missing = sorted(k for k in keys if k not in _documented())
    assert missing == []


def test_every_csv_column_is_documented():
    words = _documented()
    explicit = set(cell.CSV_COLUMNS) - {"r12", "r13", "r21", "r22", "r23", "r31", "r32"}  # "r11 .. r33"
    assert sorted(c for c in explicit if c not in words) == []
    assert "`r11` .. `r33`" in DOC


def test_the_documented_default_clearances_are_the_loaders():
    row = re.search(r"\| `fence` \| `guard`.*\n\|[-|]+\n(\|.*\|)", DOC).group(1)
    values = [float(v.strip().removesuffix(" mm")) for v in row.strip("|").split("|")]
    assert values == [cell.DEFAULT_CLEARANCE_MM[k] for k in ZONE_KINDS]
