"""Rig clean-up: cameras of a rig made to agree before vectors are estimated between them.

- `color-match`: each camera's colour matched to a reference camera (robust gain/offset or matrix);
- `align-views`: each camera steadied about a point of interest by a 2D transform from feature
  matches (similarity or homography, RANSAC).
"""
