"""The serial executor: every task in this process, in order. The debugging path."""

from __future__ import annotations

from graphcore.evaluate import Evaluator
from graphcore.execute.plan import ProgressFn, RunReport, Task, render_task

__all__ = ["SerialExecutor"]


class SerialExecutor:
    """Runs tasks one after another on one evaluator (its cache serves neighbouring frames)."""

    jobs = 1

    def run(self, ev: Evaluator, tasks: list[Task], on_result: ProgressFn | None = None) -> RunReport:
        report = RunReport()
        ev.plan([(t.node_id, t.sample) for t in tasks])
        for task in tasks:
            result = render_task(ev, task)
            report.results.append(result)
            if on_result is not None:
                on_result(result)
        report.calls.update(ev.calls)
        return report
