"""Contact cases on python-fcl's signed-distance path, run in a child process so that a crash fails the
test instead of ending the test run; the values are checked too. The first one ended the process with
a segmentation fault before the engine stopped asking for signed distances of mesh pairs."""

import subprocess
import sys
import textwrap

DEMO_SEGFAULT = textwrap.dedent(
    """
    import numpy as np
    from envelope.cell import load_cell
    from envelope.clearance import ClearanceEngine
    from envelope.demo import demo_cell_path
    # This configuration puts the link-6 hull in contact with the outfeed chute mesh; python-fcl's
    # signed distance on that pair ended the process with a segmentation fault.
    q = [-0.9063009277001397, 1.4523556158715358, -0.44868533695752433, 2.154657630897429,
         1.2331395140047912, 0.4647688365099478]
    r = ClearanceEngine(load_cell(demo_cell_path())).evaluate(q)
    assert np.isfinite(r.distance).all()
    print("ok", int(r.overall))
    """
)

TOUCHING_CAPSULE = textwrap.dedent(
    """
    import numpy as np
    from envelope.cell import Cell, Tool
    from envelope.clearance import ClearanceEngine
    from envelope.geometry import Body, Box, Capsule, Zone
    from envelope.kinematics import Arm
    # A capsule lying exactly on a box top at round coordinates: an exact touch, the case that takes
    # the signed-distance path with the contact push. The flange of this arm at q = 0 is at z = 0.5 m
    # (frame axes along the world's); the capsule's lowest point is at z = 0.3 m, the box top too
    # (elementary geometry): the distance is 0.
    arm = Arm.from_dh([0.0, 0.0, 0.0, 0.0, 0.0, 0.0], [0.0] * 6, [0.5, 0.0, 0.0, 0.0, 0.0, 0.0],
                      [0.0] * 6)
    links = tuple(Body(f"link{i}", i, ()) for i in range(7))
    tool = Tool(np.eye(4), (Body("tool", 6, (Capsule([0.0, 0.0, -0.1], [0.3, 0.0, -0.1], 0.1),), role="tool"),))
    pose = np.eye(4)
    pose[:3, 3] = [0.15, 0.0, 0.2]
    zone = Zone("block", "keep-out", (Box([0.2, 0.2, 0.2], pose),), 0.0)
    cell = Cell("touch", arm, np.eye(4), links, tool, (zone,))
    for prune in (True, False):
        r = ClearanceEngine(cell, prune=prune).evaluate(np.zeros(6))
        d = float(r.distance[0])
        assert -2.1e-5 <= d <= 1e-9, d  # touching: 0, never more than the truth, at most 2 pushes below
    print("ok", d)
    """
)


def _run(code):
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)


def test_hull_touching_a_zone_mesh_does_not_crash():
    proc = _run(DEMO_SEGFAULT)
    assert proc.returncode == 0, (proc.returncode, proc.stderr[-2000:])
    assert proc.stdout.startswith("ok")


def test_capsule_exactly_touching_a_box_does_not_crash():
    proc = _run(TOUCHING_CAPSULE)
    assert proc.returncode == 0, (proc.returncode, proc.stderr[-2000:])
    assert proc.stdout.startswith("ok")
