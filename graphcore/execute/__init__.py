"""Executors: hand out (sink, sample) tasks to the shared evaluation core.

``SerialExecutor`` runs them in this process (the debugging path); ``PoolExecutor`` runs contiguous
chunks of them in worker processes, each with its own evaluator over the same graph and the
shared disk cache. Both return the same ``FrameResult`` records and produce identical pixels.
"""

from graphcore.execute.plan import FrameResult, RunReport, Task, make_tasks, output_frames, protected_paths
from graphcore.execute.pool import PoolExecutor
from graphcore.execute.serial import SerialExecutor

__all__ = ["Task", "FrameResult", "RunReport", "make_tasks", "output_frames", "protected_paths",
           "SerialExecutor", "PoolExecutor"]
