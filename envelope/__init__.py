"""envelope: offline safety-envelope and clearance checks for six-axis industrial robot arms.

The pipeline, one module each: kinematics -> geometry -> clearance -> check -> report -> cli.
The library works in metres and radians; files use millimetres and degrees (see ``envelope.units``).
"""

__version__ = "0.1.0"
