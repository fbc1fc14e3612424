"""The demo scenario: a procedural scene of our own with exact ground truth.

``Scene`` renders "the paper fair": a spinning paper pinwheel on a stick, a rolling painted ball
and a falling paper streamer in front of a painted backdrop, seen by a row of virtual cameras.
Any fractional frame and view can be rendered, so the same generator gives plates for the demo and
true in-between frames and views for tests.
"""

from graphcore.demo.scene import Camera, Pose, RigImperfections, Scene

__all__ = ["Scene", "RigImperfections", "Camera", "Pose"]
