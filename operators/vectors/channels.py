"""Channel names of vector images (OpenEXR ``layer.channel`` convention).

A vector image at sample ``s`` along an axis (time or view) holds:

- ``fwd.x fwd.y``: at ``s``'s pixels, where that content is at the next sample ``s+1``
  (pixels, x right, y down);
- ``bwd.x bwd.y``: at ``s``'s pixels, where that content is at the previous sample ``s-1``;
- after ``vector-smooth``, per direction: ``fwd.conf`` / ``bwd.conf`` (0..1 confidence) and
  ``fwd.occ`` / ``bwd.occ`` (1 where the pixel is hidden at the neighbour, 0 where visible).

So the vectors between ``s`` and ``s+1`` are ``fwd`` of the image at ``s`` and ``bwd`` of the image
at ``s+1``; an in-between at ``s + t`` asks for both. ``midframe vectors FIRST SECOND`` writes the
same pair into one file: ``fwd`` at FIRST's pixels, ``bwd`` at SECOND's pixels, and ``conf`` (the
forward confidence) plus ``bwd.conf``.
"""

FWD = ("fwd.x", "fwd.y")
BWD = ("bwd.x", "bwd.y")
VECTORS = FWD + BWD
FWD_CONF, BWD_CONF = "fwd.conf", "bwd.conf"
FWD_OCC, BWD_OCC = "fwd.occ", "bwd.occ"
SMOOTHED = VECTORS + (FWD_CONF, BWD_CONF, FWD_OCC, BWD_OCC)
