"""In-between synthesis: frames (and later views) no camera shot, built from motion vectors.

- `warp`: the image at a fractional sample from one neighbour and the vectors (forward splatting
  of the vectors to the in-between time, then backward sampling of the neighbour);
- `retime`: maps each output frame to a source time (slow-down, frame-rate conversion, time curve).

The two warped neighbours meet in `blend` (mode ``inbetween``), which weighs them by distance in
time and by each side's visibility.
"""
