"""Kinematics: the arm model, forward kinematics and every inverse-kinematics branch."""

from .arm import Arm, N_JOINTS

__all__ = ["Arm", "N_JOINTS"]
