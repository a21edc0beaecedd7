"""The operating space of `envelope check` holds the programmed motions, not only the targets."""

import numpy as np
import pytest
import trimesh

from envelope.cell import load_cell
from envelope.check import check_cell
from envelope.demo import demo_cell_path
from envelope.scene import posed_link_meshes
from envelope.sweep import swept_configurations


@pytest.fixture(scope="module")
def demo():
    cell = load_cell(demo_cell_path())
    return cell, check_cell(cell, space_pitch=0.04)


def test_swept_configurations_step_bound(demo):
    cell, result = demo
    q, grow = swept_configurations(cell, result.motions, max_step=0.01)
    assert len(q) > len(result.motions) and grow >= 0.005
    joint = [m for m in result.motions if m.motion == "joint"]
    for m in joint:
        # the joint move's two ends are among the samples
        assert np.isclose(q, m.q_start).all(axis=1).any() and np.isclose(q, m.q_end).all(axis=1).any()


def test_bodies_along_every_joint_move_lie_in_the_operating_space(demo):
    cell, result = demo
    space = result.space.operating
    assert space is not None
    rng = np.random.default_rng(3)
    for m in (m for m in result.motions if m.motion == "joint"):
        # independent of the sweep's sampling: random points of the straight joint path, the posed
        # meshes (envelope.scene) sampled on their surfaces with trimesh
        for s in rng.uniform(0, 1, 6):
            q = m.q_start + s * (m.q_end - m.q_start)
            meshes = posed_link_meshes(cell, q)
            for name, mesh in meshes.items():
                if name == "link 0":
                    continue  # the base is not part of any space (docs/spaces.md)
                pts = trimesh.sample.sample_surface(mesh, 50, seed=1)[0]
                assert space.contains(pts).all(), (m.move, name, s)
