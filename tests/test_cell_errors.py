"""Malformed cell files: every error names the file, the item and what is wrong."""

from __future__ import annotations

from pathlib import Path

import pytest
import trimesh

from envelope.cell import load_cell
from envelope.errors import CellFileError, InputError, PoseError, ProgramError

DATA = Path(__file__).parent / "data"
MINIMAL = (DATA / "minimal-cell.toml").read_text()


def write_cell(tmp_path: Path, top: str = "", tail: str = "", base: str = MINIMAL) -> Path:
    path = tmp_path / "cell.toml"
    path.write_text(top + "\n" + base + "\n" + tail)
    return path


def test_the_base_fixture_loads(tmp_path):
    assert load_cell(write_cell(tmp_path)).name == "minimal test cell"


def test_missing_cell_file(tmp_path):
    with pytest.raises(CellFileError, match=r"cell file not found"):
        load_cell(tmp_path / "nope.toml")


def test_toml_syntax_error_names_the_file(tmp_path):
    path = write_cell(tmp_path, tail="[[zones]\nname = 1\n")
    with pytest.raises(CellFileError, match=r"cell\.toml: not valid TOML"):
        load_cell(path)


def test_missing_key(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace('convention = "standard"\n', ""))
    with pytest.raises(CellFileError, match=r"cell\.toml: \[arm\]: missing key 'convention'"):
        load_cell(path)


def test_missing_key_in_a_zone(tmp_path):
    path = write_cell(tmp_path, tail='[[zones]]\nname = "post"\nkind = "machine"\nshape = "cylinder"\nradius = 50\n')
    with pytest.raises(CellFileError, match=r'zone "post": missing key \'length\''):
        load_cell(path)


def test_unknown_key_with_suggestion(tmp_path):
    path = write_cell(tmp_path, tail='[[zones]]\nname = "ball"\nkind = "keep-out"\nshape = "sphere"\n'
                                     'center = [0, 0, 0]\nradious = 100\n')
    with pytest.raises(CellFileError, match=r"zone \"ball\": unknown key 'radious'.*did you mean 'radius'"):
        load_cell(path)


def test_unknown_top_level_key_with_suggestion(tmp_path):
    path = write_cell(tmp_path, top="self_clearence = 5")
    with pytest.raises(CellFileError, match=r"unknown key 'self_clearence'.*did you mean 'self_clearance'"):
        load_cell(path)


def test_unknown_zone_kind_with_suggestion(tmp_path):
    path = write_cell(tmp_path, tail='[[zones]]\nname = "k"\nkind = "keepout"\nshape = "sphere"\n'
                                     'center = [0, 0, 0]\nradius = 10\n')
    with pytest.raises(CellFileError, match=r"key 'kind' must be one of .*got 'keepout' \(did you mean 'keep-out'\?\)"):
        load_cell(path)


def test_wrong_type(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("capsule_radius = 50", 'capsule_radius = "fifty"'))
    with pytest.raises(CellFileError, match=r"\[arm\]: key 'capsule_radius' must be a number, got a string 'fifty'"):
        load_cell(path)


def test_wrong_vector_length(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("[arm.mount]\nxyz = [0, 0, 0]", "[arm.mount]\nxyz = [0, 0]"))
    msg = r"\[arm\.mount\]: key 'xyz' must be a list of 3 numbers, got a list of 2 items"
    with pytest.raises(CellFileError, match=msg):
        load_cell(path)


def test_negative_radius(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("radius = 20", "radius = -5"))
    with pytest.raises(CellFileError, match=r'tool "probe": key \'radius\' must be > 0, got -5'):
        load_cell(path)


def test_missing_mesh_file(tmp_path):
    path = write_cell(tmp_path, tail='[[zones]]\nname = "machine"\nkind = "machine"\nshape = "mesh"\n'
                                     'file = "meshes/missing.stl"\n')
    with pytest.raises(CellFileError, match=r"zone \"machine\": file not found: 'meshes/missing\.stl'"):
        load_cell(path)


def test_unreadable_mesh_file(tmp_path):
    (tmp_path / "junk.stl").write_bytes(b"not a mesh at all")
    path = write_cell(tmp_path, tail='[[arm.links]]\nlink = 2\nshape = "mesh"\nfile = "junk.stl"\n')
    with pytest.raises(CellFileError, match=r"link 2 \"link 2\": (cannot read mesh file|mesh file) 'junk\.stl'"):
        load_cell(path)


def test_non_orthonormal_target_matrix(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "skewed"\n'
                                     "matrix = [[1, 0.1, 0, 500], [0, 1, 0, 0], [0, 0, 1, 600], [0, 0, 0, 1]]\n")
    with pytest.raises(PoseError, match=r'cell\.toml: target "skewed": rotation block is not orthonormal'):
        load_cell(path)


def test_reflection_matrix_is_rejected(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "mirror"\n'
                                     "matrix = [[-1, 0, 0, 500], [0, 1, 0, 0], [0, 0, 1, 600], [0, 0, 0, 1]]\n")
    with pytest.raises(PoseError, match=r'target "mirror": rotation block has determinant -1'):
        load_cell(path)


def test_non_unit_quaternion_is_rejected(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "q"\nxyz = [500, 0, 600]\nquaternion = [1, 1, 0, 0]\n')
    with pytest.raises(PoseError, match=r'target "q": quaternion must have unit norm'):
        load_cell(path)


def test_unknown_euler_convention(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "e"\neuler = [0, 0, 0]\nconvention = "xyz"\n')
    with pytest.raises(PoseError, match=r'target "e": unknown Euler convention \'xyz\''):
        load_cell(path)


def test_two_orientations_are_rejected(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "e"\neuler = [0, 0, 0]\nquaternion = [1, 0, 0, 0]\n')
    with pytest.raises(CellFileError, match=r"give only one of 'euler', 'quaternion', 'matrix'"):
        load_cell(path)


def test_csv_with_a_bad_row_names_the_row(tmp_path):
    (tmp_path / "targets.csv").write_text((DATA / "bad-row-targets.csv").read_text())
    path = write_cell(tmp_path, top='targets_file = "targets.csv"')
    with pytest.raises(CellFileError, match=r"targets\.csv: row 4 target \"bad-3\": column 'y' must be a number, "
                                            r"got 'two hundred'"):
        load_cell(path)


def test_csv_unknown_column(tmp_path):
    (tmp_path / "t.csv").write_text("name,x,y,z,eular_1\n")
    path = write_cell(tmp_path, top='targets_file = "t.csv"')
    msg = r"t\.csv: row 1 \(header\): unknown column 'eular_1'.*did you mean 'euler_1'"
    with pytest.raises(CellFileError, match=msg):
        load_cell(path)


def test_csv_bad_rotation_names_the_row(tmp_path):
    (tmp_path / "t.csv").write_text("name,x,y,z,r11,r12,r13,r21,r22,r23,r31,r32,r33\n"
                                    "ok,0,0,0,1,0,0,0,1,0,0,0,1\n"
                                    "squashed,0,0,0,2,0,0,0,1,0,0,0,1\n")
    path = write_cell(tmp_path, top='targets_file = "t.csv"')
    with pytest.raises(PoseError, match=r't\.csv: row 3 target "squashed": rotation block is not orthonormal'):
        load_cell(path)


def test_csv_short_row(tmp_path):
    (tmp_path / "t.csv").write_text("name,x,y,z\nok,0,0,0\nshort,0,0\n")
    path = write_cell(tmp_path, top='targets_file = "t.csv"')
    with pytest.raises(CellFileError, match=r"t\.csv: row 3: expected 4 cells as in the header, got 3"):
        load_cell(path)


def test_frame_cycle(tmp_path):
    path = write_cell(tmp_path, tail='[frames.a]\nparent = "b"\n[frames.b]\nparent = "c"\n[frames.c]\nparent = "a"\n')
    msg = r"frames form a cycle: (a -> b -> c -> a|b -> c -> a -> b|c -> a -> b -> c)"
    with pytest.raises(CellFileError, match=msg):
        load_cell(path)


def test_unknown_parent_frame(tmp_path):
    path = write_cell(tmp_path, tail='[frames.table]\nparent = "wrold"\n')
    msg = r"frame \"table\": unknown parent frame 'wrold' \(did you mean 'world'\?\)"
    with pytest.raises(CellFileError, match=msg):
        load_cell(path)


def test_unknown_target_frame(tmp_path):
    path = write_cell(tmp_path, tail='[frames.table]\nxyz = [1, 2, 3]\n[[targets]]\nname = "t"\nframe = "tabel"\n')
    with pytest.raises(CellFileError, match=r"target \"t\": unknown frame 'tabel' \(did you mean 'table'\?\)"):
        load_cell(path)


def test_builtin_frame_cannot_be_redefined(tmp_path):
    path = write_cell(tmp_path, tail="[frames.base]\nxyz = [1, 2, 3]\n")
    with pytest.raises(CellFileError, match=r"'base' is built in"):
        load_cell(path)


def test_wrong_number_of_joints(tmp_path):
    cut = MINIMAL.index("[[arm.joints]]", MINIMAL.index("d = 440"))
    end = MINIMAL.index("[arm.mount]")
    path = write_cell(tmp_path, base=MINIMAL[:cut] + MINIMAL[end:])
    with pytest.raises(CellFileError, match=r"\[\[arm\.joints\]\] must have 6 rows .*got 4"):
        load_cell(path)


def test_joint_limits_out_of_order(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("min = -80\nmax = 145", "min = 145\nmax = -80"))
    with pytest.raises(CellFileError, match=r"joint 2: joint limit 'min' 145 must be below 'max' -80"):
        load_cell(path)


def test_link_without_geometry_and_no_capsule_radius(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("capsule_radius = 50\n", ""))
    with pytest.raises(CellFileError, match=r"link 0 has no geometry and \[arm\] 'capsule_radius' is not given"):
        load_cell(path)


def test_link_index_out_of_range_and_twice(tmp_path):
    path = write_cell(tmp_path, tail="[[arm.links]]\nlink = 7\n")
    with pytest.raises(CellFileError, match=r"key 'link' must be 0 \(base\) \.\. 6 \(flange\), got 7"):
        load_cell(path)
    path = write_cell(tmp_path, tail="[[arm.links]]\nlink = 3\n[[arm.links]]\nlink = 3\n")
    with pytest.raises(CellFileError, match=r"link 3 is given twice"):
        load_cell(path)


def test_duplicate_names(tmp_path):
    zone = '[[zones]]\nname = "floor"\nkind = "floor"\nshape = "half-space"\npoint = [0, 0, 0]\nnormal = [0, 0, 1]\n'
    with pytest.raises(CellFileError, match=r'zone "floor": two zones have this name'):
        load_cell(write_cell(tmp_path, tail=zone))
    targets = '[[targets]]\nname = "t"\n[[targets]]\nname = "t"\n'
    with pytest.raises(CellFileError, match=r'target "t": target \'t\' is defined twice'):
        load_cell(write_cell(tmp_path, tail=targets))
    with pytest.raises(CellFileError, match=r"two bodies share the name 'link 2'"):
        load_cell(write_cell(tmp_path, base=MINIMAL.replace('name = "probe"', 'name = "link 2"')))


def test_unknown_body_in_allowed_lists(tmp_path):
    path = write_cell(tmp_path, top='allowed_self_pairs = [["link 6", "prob"]]')
    msg = r"allowed_self_pairs: pair 1: unknown body 'prob' \(did you mean 'probe'\?\)"
    with pytest.raises(CellFileError, match=msg):
        load_cell(path)
    path = write_cell(tmp_path, base=MINIMAL.replace('allowed = ["link 0"]', 'allowed = ["link O"]'))
    with pytest.raises(CellFileError, match=r"zone \"floor\": 'allowed' names an unknown body 'link O'"):
        load_cell(path)


def test_fence_problems(tmp_path):
    fence = '[[zones]]\nname = "f"\nkind = "fence"\nshape = "fence"\npoints = [[0, 0], [0, 0], [1000, 0]]\n' \
            "height = 1400\nthickness = 40\n"
    with pytest.raises(CellFileError, match=r'zone "f": fence segment 1 has zero length'):
        load_cell(write_cell(tmp_path, tail=fence))
    with pytest.raises(CellFileError, match=r"'bottom_gap' 1500 mm must be below its 'height' 1400 mm"):
        load_cell(write_cell(tmp_path, tail=fence.replace("[0, 0], [0, 0]", "[0, 0]") + "bottom_gap = 1500\n"))
    with pytest.raises(CellFileError, match=r"key 'opening_shape' must be one of 'slot', 'square', 'round'"):
        load_cell(write_cell(tmp_path, tail=fence.replace("[0, 0], [0, 0]", "[0, 0]")
                             + 'opening_size = 20\nopening_shape = "hexagon"\n'))
    with pytest.raises(CellFileError, match=r"'opening_length' is the length of slot openings"):
        load_cell(write_cell(tmp_path, tail=fence.replace("[0, 0], [0, 0]", "[0, 0]")
                             + 'opening_size = 20\nopening_shape = "round"\nopening_length = 50\n'))


def test_prism_problems(tmp_path):
    prism = '[[zones]]\nname = "p"\nkind = "fixture"\nshape = "prism"\nz_min = 0\nz_max = 100\n'
    with pytest.raises(CellFileError, match=r"zone \"p\": prism 'points' outline crosses itself"):
        load_cell(write_cell(tmp_path, tail=prism + "points = [[0, 0], [100, 100], [100, 0], [0, 100]]\n"))
    with pytest.raises(CellFileError, match=r"'z_max' 0 mm must exceed 'z_min' 0 mm"):
        load_cell(write_cell(tmp_path, tail=prism.replace("z_max = 100", "z_max = 0")
                             + "points = [[0, 0], [100, 0], [0, 100]]\n"))


def test_box_problems(tmp_path):
    box = '[[zones]]\nname = "b"\nkind = "fixture"\nshape = "box"\n'
    with pytest.raises(CellFileError, match=r"box 'max' \[0.0, 10.0, 10.0\] must exceed 'min'"):
        load_cell(write_cell(tmp_path, tail=box + "min = [0, 0, 0]\nmax = [0, 10, 10]\n"))
    with pytest.raises(CellFileError, match=r"either 'size' \(with a pose\) or 'min' and 'max'"):
        load_cell(write_cell(tmp_path, tail=box + "size = [1, 1, 1]\nmin = [0, 0, 0]\n"))
    with pytest.raises(CellFileError, match=r"key 'size' must be three values > 0"):
        load_cell(write_cell(tmp_path, tail=box + "size = [1, 0, 1]\n"))


def test_half_space_zero_normal(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("normal = [0, 0, 1]", "normal = [0, 0, 0]"))
    with pytest.raises(CellFileError, match=r"half-space 'normal' must be a non-zero vector"):
        load_cell(path)


def test_body_cannot_use_a_zone_only_shape(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace('shape = "capsule"', 'shape = "half-space"'))
    with pytest.raises(CellFileError, match=r"tool \"probe\": key 'shape' must be one of"):
        load_cell(path)


def test_program_unknown_target(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "pick"\n[[programs]]\nname = "cycle"\n'
                                     'moves = [{ to = "pick", motion = "joint" }, { to = "pik", motion = "linear" }]\n')
    msg = r'program "cycle" move 2: unknown target \'pik\' \(did you mean \'pick\'\?\)'
    with pytest.raises(ProgramError, match=msg):
        load_cell(path)


def test_program_bad_motion(tmp_path):
    path = write_cell(tmp_path, tail='[[targets]]\nname = "pick"\n[[programs]]\nname = "cycle"\n'
                                     'moves = [{ to = "pick", motion = "circular" }]\n')
    with pytest.raises(CellFileError, match=r"move 1: key 'motion' must be one of 'joint', 'linear'"):
        load_cell(path)


def test_every_error_is_an_input_error_with_file_and_item(tmp_path):
    path = write_cell(tmp_path, base=MINIMAL.replace("radius = 20", "radius = -5"))
    with pytest.raises(InputError) as info:
        load_cell(path)
    assert info.value.file == str(path) and info.value.item == 'tool "probe"'
    assert info.value.exit_code == 2


def test_flat_link_mesh_is_rejected(tmp_path):
    square = trimesh.Trimesh([[0, 0, 0], [100, 0, 0], [100, 100, 0], [0, 100, 0]], [[0, 1, 2], [0, 2, 3]])
    square.export(tmp_path / "plate.stl")
    path = write_cell(tmp_path, tail='[[arm.links]]\nlink = 1\nshape = "mesh"\nfile = "plate.stl"\n')
    with pytest.raises(CellFileError, match=r"link 1 \"link 1\": mesh file 'plate\.stl' is flat"):
        load_cell(path)
