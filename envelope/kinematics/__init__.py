"""Kinematics: the arm model, forward kinematics and every inverse-kinematics branch."""

from .arm import Arm, N_JOINTS
from .branches import BRANCH_LABELS
from .ik import IKBatch, IKSolutions

__all__ = ["Arm", "N_JOINTS", "BRANCH_LABELS", "IKBatch", "IKSolutions"]
