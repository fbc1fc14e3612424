"""``midframe``: render, check and inspect node graphs from the command line.

Exit status: 0 success, 2 invalid input (graph, params, variables, files; the message names the
file, node, field and fix, never a traceback), 1 internal failure.
"""

from __future__ import annotations

import argparse
import json
import logging
import re
import shutil
import subprocess
import sys
from collections.abc import Sequence

from graphcore import __version__
from graphcore.errors import GraphErrors, InputError, MidframeError
from graphcore.registry import FrameRange, PluginError, Registry
from graphcore.sample import compact_frames

__all__ = ["build_parser", "main"]

log = logging.getLogger("midframe")

EXIT_OK, EXIT_FAILURE, EXIT_INVALID = 0, 1, 2


class UsageError(InputError):
    """A command-line argument that cannot be used."""


def _frames_arg(text: str) -> FrameRange:
    m = re.fullmatch(r"\s*(-?\d+)\s*(?:-\s*(-?\d+)\s*)?", text)
    if not m:
        raise argparse.ArgumentTypeError(f"{text!r} is not a frame range; write FIRST-LAST, e.g. 1001-1048")
    first = int(m.group(1))
    last = int(m.group(2)) if m.group(2) is not None else first
    if last < first:
        raise argparse.ArgumentTypeError(f"frame range {text!r} runs backwards; write FIRST-LAST")
    return FrameRange(first, last)


def _positive_int(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be 1 or more")
    return n


def _size_arg(text: str) -> int:
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*([KMGT]?)i?B?\s*", text, flags=re.IGNORECASE)
    if not m:
        raise argparse.ArgumentTypeError(f"{text!r} is not a size; write e.g. 500M or 20G")
    scale = {"": 1, "K": 1 << 10, "M": 1 << 20, "G": 1 << 30, "T": 1 << 40}[m.group(2).upper()]
    return int(float(m.group(1)) * scale)


def _human(n: float) -> str:
    for unit in ("B", "KB", "MB", "GB"):
        if n < 1024:
            return f"{n:.1f} {unit}" if unit != "B" else f"{int(n)} B"
        n /= 1024
    return f"{n:.1f} TB"


def _add_graph_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("graph", help="graph file (JSON)")
    p.add_argument("--set", dest="sets", action="append", default=[], metavar="NAME=VALUE",
                   help="set a template variable (repeatable)")
    p.add_argument("--defaults", metavar="FILE", help="show-level defaults file layered beneath the graph")
    p.add_argument("--plugin", dest="plugins", action="append", default=[], metavar="MODULE:ATTR",
                   help="load an operator from an explicitly named module (repeatable)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="midframe", description="Headless node-graph compositing engine: "
                                     "in-between frames from motion vectors, rendered from JSON graphs.")
    parser.add_argument("--version", action="version", version=f"midframe {__version__}")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
    parser.add_argument("--log-format", choices=("text", "json"), default="text",
                        help="standard error as text (default) or one JSON object per line, for farm "
                             "log scraping (events: log, frame, warning, error, summary)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    p = sub.add_parser("run", help="render a graph")
    _add_graph_args(p)
    p.add_argument("--frames", type=_frames_arg, metavar="A-B", help="frames to render (default: all the "
                   "sources have)")
    p.add_argument("--jobs", type=_positive_int, default=1, metavar="N", help="worker processes (default 1)")
    p.add_argument("--cache", metavar="DIR", help="disk cache folder (shareable between runs and hosts)")
    p.add_argument("--cache-limit", type=_size_arg, metavar="SIZE", help="after the render, prune the disk "
                   "cache to this size (least recently used first), e.g. 50G")
    p.add_argument("--memory", type=_positive_int, default=2048, metavar="MB",
                   help="in-memory cache size, shared out between --jobs workers (default 2048 MB)")
    p.add_argument("--scheduler", metavar="ADDR", help="render on Dask distributed: tcp://HOST:PORT of a running "
                   "scheduler (its workers need this midframe installed), or local:N for a local cluster "
                   "of N worker processes")
    p.add_argument("--resume", action="store_true", help="skip outputs already complete at their final "
                   "path (EXR files whose provenance header carries this render's content key: same "
                   "graph, params and source files)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress output")

    p = sub.add_parser("check", help="validate a graph without rendering")
    _add_graph_args(p)

    p = sub.add_parser("assess", help="predict which in-betweens of a retime will break, from the shot itself",
                       description="Rebuild real source frames from neighbours one step further apart "
                       "(leave-one-out), compare, and combine that with the two warped sides of every "
                       "in-between and its vector confidence into a risk per in-between output frame "
                       "(higher is worse), for a retime or a view morph. Prints a table; --json and --report keep it.")
    _add_graph_args(p)
    p.add_argument("--frames", type=_frames_arg, metavar="A-B", help="output frames to assess (default: all "
                   "the render would write)")
    p.add_argument("--node", metavar="ID", help="the retime or view-path node to assess (only needed when there "
                   "are several)")
    p.add_argument("--json", dest="json_out", metavar="OUT.json", help="write the assessment as JSON")
    p.add_argument("--report", metavar="DIR", help="write a static HTML report (index.html and pictures) into "
                   "DIR (new, or a report folder written before)")
    p.add_argument("--worst", type=_positive_int, default=6, metavar="N", help="pictures for the N riskiest "
                   "frames in the report (default 6)")
    p.add_argument("--jobs", type=_positive_int, default=1, metavar="N", help="worker processes, each taking a "
                   "contiguous run of the in-betweens (default 1)")
    p.add_argument("--cache", metavar="DIR", help="disk cache folder: give the render's own, and the vectors "
                   "computed here are not computed again by the render")
    p.add_argument("--memory", type=_positive_int, default=2048, metavar="MB", help="in-memory cache size "
                   "(default 2048 MB)")

    p = sub.add_parser("cache", help="inspect or prune a disk cache folder")
    p.add_argument("action", choices=("stats", "prune"), help="stats: entries and size; prune: remove the "
                   "least recently used entries down to --max-size, and stale temporary files")
    p.add_argument("dir", help="the cache folder (as given to --cache)")
    p.add_argument("--max-size", type=_size_arg, metavar="SIZE", help="prune: keep at most this much, "
                   "e.g. 500M, 20G (default: only stale temporary files are removed)")
    p.add_argument("--verify", action="store_true", help="stats: also check every entry's checksum "
                   "(reads everything) and remove damaged ones")

    p = sub.add_parser("explain", help="how a frame midframe wrote was made (from its provenance header)")
    p.add_argument("file", help="an EXR file written by midframe")
    p.add_argument("--json", action="store_true", help="the provenance record as JSON")

    p = sub.add_parser("chunks", help="split a render into frame chunks for a farm queue")
    _add_graph_args(p)
    p.add_argument("--frames", type=_frames_arg, metavar="A-B", help="frames to split (default: all the "
                   "sources have)")
    p.add_argument("--size", type=_positive_int, required=True, metavar="N", help="frames per chunk")
    p.add_argument("--json", action="store_true", help="a JSON job list instead of command lines")
    p.add_argument("--cache", metavar="DIR", help="shared disk cache folder, passed to every chunk's "
                   "command (neighbouring chunks then compute shared vectors once)")
    p.add_argument("--jobs", type=_positive_int, metavar="N", help="worker processes per chunk, passed on")

    p = sub.add_parser("ops", help="list operators, or show one")
    p.add_argument("name", nargs="?", help="operator to describe")
    p.add_argument("--markdown", action="store_true", help="the full operator reference as Markdown")
    p.add_argument("--builtin", action="store_true", help="only the operators midframe itself ships")
    p.add_argument("--plugin", dest="plugins", action="append", default=[], metavar="MODULE:ATTR")

    p = sub.add_parser("schema", help="print the graph JSON Schema")
    p.add_argument("--out", metavar="FILE", help="write to FILE instead of standard output")
    p.add_argument("--builtin", action="store_true", help="only the operators midframe itself ships "
                   "(default: every installed operator, plugins included)")

    p = sub.add_parser("graph", help="draw a graph (DOT text; SVG/PNG with Graphviz)")
    _add_graph_args(p)
    p.add_argument("--format", choices=("dot", "svg", "png"), default="dot")
    p.add_argument("--out", metavar="FILE", help="output file (default: standard output, DOT only)")

    from graphcore.cli.vectors import add_parser as add_vectors

    add_vectors(sub)

    p = sub.add_parser("demo", help="build the demo scenario and render it")
    p.add_argument("outdir", help="folder to create the demo in")
    p.add_argument("--jobs", type=_positive_int, default=1, metavar="N")
    return parser


def _registry(plugins: Sequence[str]) -> Registry:
    from graphcore.registry import default_registry

    reg = default_registry()
    for target in plugins:
        try:
            reg.add_target(target)
        except PluginError as exc:
            raise UsageError(str(exc), field="--plugin", fix="name an importable module:attribute holding "
                             "an Operator") from None
    return reg


#: Set by main() for --log-format json.
_JSON = False


def _print_warnings(warnings) -> None:
    for w in warnings:
        if _JSON:
            from graphcore.cli.jsonlog import emit, error_fields

            emit("warning", "warning", **error_fields(w))
        else:
            print(f"midframe: warning: {w.describe()}", file=sys.stderr)


# -- commands --------------------------------------------------------------------------------------
def cmd_check(args: argparse.Namespace) -> int:
    from graphcore.evaluate import Evaluator
    from graphcore.execute.plan import (
        check_targets,
        make_tasks,
        output_frames,
        protected_paths,
        unwritable_outputs,
    )
    from graphcore.validate import load_graph

    reg = _registry(args.plugins)
    loaded = load_graph(args.graph, sets=args.sets, defaults=args.defaults, registry=reg, allow_unset=True)
    _print_warnings(loaded.warnings)
    if loaded.graph is None:
        n = len(loaded.document.get("nodes") or {})
        print(f"{args.graph}: valid template ({n} nodes); set its variables to check files too")
        return EXIT_OK
    ev = Evaluator(loaded.graph, reg)
    frames = output_frames(ev, None) if ev.sinks() else []
    tasks = make_tasks(ev, frames)
    check_targets(ev, tasks, protected_paths(ev))
    _print_warnings(unwritable_outputs(ev, tasks))   # a farm node may have other rights: warn only
    span = f"frames {frames[0]}-{frames[-1]}" if frames else "no frames"
    print(f"{args.graph}: valid; {len(loaded.graph.nodes)} nodes, {len(ev.sinks())} outputs, {span}")
    return EXIT_OK


def _group_sources(paths: list[str]) -> list[str]:
    """File paths as compact lines: ``folder/name.####.exr  frames 1001-1010`` per numbered run."""
    runs: dict[tuple[str, int, str], list[int]] = {}
    lone: list[str] = []
    for p in paths:
        m = re.fullmatch(r"(.*?)(\d+)(\.[A-Za-z0-9]+)", p)
        if m is None:
            lone.append(p)
            continue
        runs.setdefault((m.group(1), len(m.group(2)), m.group(3)), []).append(int(m.group(2)))
    out = [f"{head}{'#' * width}{tail}  frames {compact_frames(nums)}" for (head, width, tail), nums in sorted(runs.items())]
    return out + lone


def _report_folder(path: str) -> None:
    """Refuse a report folder that holds anything but an earlier report (nothing of the user's is lost)."""
    import os

    if os.path.exists(path) and not os.path.isdir(path):
        raise UsageError("not a folder", file=path, field="--report", fix="name a new folder or an earlier report's")
    if os.path.isdir(path):
        foreign = sorted(set(os.listdir(path)) - {"index.html", "pictures", "assess.json"})
        if foreign:
            raise UsageError(f"the folder holds other files ({', '.join(foreign[:3])}"
                             f"{' ...' if len(foreign) > 3 else ''}), so it is not a report folder", file=path,
                             field="--report", fix="name a new folder, or an earlier report's folder")


def cmd_assess(args: argparse.Namespace) -> int:
    import math
    import os
    import tempfile

    from graphcore.assess import assess

    if args.report:
        _report_folder(args.report)
    if not args.verbose:
        # the rebuilds' own in-between notes name samples the render never makes; -v shows them
        logging.getLogger("midframe.render").setLevel(logging.ERROR)
    reg = _registry(args.plugins)
    found = assess(args.graph, sets=args.sets, defaults=args.defaults, frames=args.frames, node=args.node,
                   cache_dir=args.cache, memory_bytes=args.memory << 20, registry=reg, worst=args.worst,
                   jobs=args.jobs, plugins=args.plugins, on_step=lambda text: log.info("assess: %s", text) if args.verbose else None)
    doc = found.doc
    if args.json_out:
        folder = os.path.dirname(os.path.abspath(args.json_out))
        try:
            fd, tmp = tempfile.mkstemp(prefix=".assess-", suffix=".tmp", dir=folder)
            with os.fdopen(fd, "w") as fh:
                json.dump(doc, fh, indent=1, allow_nan=False)
                fh.write("\n")
            os.replace(tmp, args.json_out)
        except OSError as exc:
            raise UsageError(f"cannot write the assessment: {exc.strerror}", file=args.json_out, field="--json",
                             fix="name a file in a writable folder") from None
    if args.report:
        from graphcore.report import write_report

        try:
            index = write_report(args.report, doc, found.pictures, dict(found.graph.source) if found.graph else {})
        except OSError as exc:
            raise UsageError(f"cannot write the report: {exc.strerror}", file=args.report, field="--report",
                             fix="name a folder where files can be written") from None
        log.info("report: %s", index)

    def num(value, fmt: str) -> str:
        return "-" if value is None or (isinstance(value, float) and math.isnan(value)) else format(value, fmt)

    frames = doc["frames"]
    print(f"{'frame':>7} {'source time':>12} {'risk':>7} {'level':<7} {'LOO dB':>7} {'disagree':>9} "
          f"{'unsure':>7} {'motion':>7}")
    for e in frames:
        print(f"{e['frame']:>7} {e['source_time']:>12} {num(e['risk'], '.2f'):>7} {e['level']:<7} "
              f"{num(e['loo_psnr'], '.2f'):>7} {num(e['disagree'], '.4f'):>9} {num(e['unsure'], '.3f'):>7} "
              f"{num(e['motion'], '.2f'):>7}")
    summary = doc["summary"]
    worst = ", ".join(str(k) for k in summary["worst"]) or "none"
    print(f"midframe: {summary['in_betweens']} in-between(s): {summary['high']} high, {summary['watch']} watch "
          f"(risk >= {doc['threshold']['high']:g} / {doc['threshold']['watch']:g}); riskiest first: {worst}",
          file=sys.stderr)
    return EXIT_OK


def _check_provenance(record: dict, file: str) -> None:
    """Refuse a provenance record whose node list or source list has the wrong shape (a damaged or
    hand-edited header), naming the field, before the text report walks it."""
    nodes = record.get("nodes")
    if nodes is not None and not (isinstance(nodes, list) and all(
            isinstance(n, dict) and isinstance(n.get("params"), (dict, type(None))) for n in nodes)):
        raise UsageError("the provenance header is damaged: 'nodes' is not a list of nodes with their "
                         "params", file=file, field="midframe.provenance.nodes",
                         fix="see the raw record with --json, or render the file again")
    sources = record.get("sources")
    if sources is not None and not (isinstance(sources, list) and all(isinstance(p, str) for p in sources)):
        raise UsageError("the provenance header is damaged: 'sources' is not a list of file paths",
                         file=file, field="midframe.provenance.sources",
                         fix="see the raw record with --json, or render the file again")


def cmd_explain(args: argparse.Namespace) -> int:
    import os

    from operators.io.exr import read_provenance

    if not os.path.isfile(args.file):
        raise UsageError("no such file", file=args.file, field="file", fix="name an EXR file midframe wrote")
    record = read_provenance(args.file)
    if record is None:
        raise UsageError("the file has no midframe provenance header (it was not written by midframe's "
                         "write node)", file=args.file, field="file", fix="name an EXR file midframe wrote")
    if args.json:
        print(json.dumps(record, indent=2, sort_keys=True))
        return EXIT_OK
    _check_provenance(record, args.file)
    from graphcore.registry import default_registry

    reg = default_registry()
    where = f"frame {record.get('frame')}" + (f" view {record.get('view')}" if record.get("view") not in (None, "0") else "")
    print(f"{args.file}")
    print(f"  made by {record.get('tool', 'midframe')} {record.get('tool_version', '?')}, output node "
          f"'{record.get('node')}' at {where}")
    print(f"  graph: {record.get('graph_file') or '(not from a file)'}")
    print(f"  graph hash: {record.get('graph_hash', '?')}")
    if record.get("key"):
        print(f"  content key: {record['key']}  (midframe run --resume compares it)")
    nodes = record.get("nodes") or []
    print(f"  nodes on its path ({len(nodes)}), params that differ from the operator's defaults:")
    for node in nodes:
        params = dict(node.get("params") or {})
        shown = params
        try:
            fields = reg.get(node["op"]).params.model_fields
            base = {k: json.loads(json.dumps(f.get_default(call_default_factory=True), default=list))
                    for k, f in fields.items() if not f.is_required()}
            shown = {k: v for k, v in params.items() if k not in base or base[k] != v}
        except Exception:        # unknown operator (plugin not installed here): show every set param
            shown = {k: v for k, v in params.items() if v is not None}
        text = ", ".join(f"{k}={json.dumps(v)}" for k, v in sorted(shown.items())) or "(all defaults)"
        print(f"    {node.get('id')} ({node.get('op')}): {text}")
    sources = list(record.get("sources") or [])
    print(f"  source files ({len(sources)}):")
    for line in _group_sources(sources):
        print(f"    {line}")
    return EXIT_OK


def cmd_chunks(args: argparse.Namespace) -> int:
    import os
    import shlex

    from graphcore.evaluate import Evaluator
    from graphcore.execute.chunks import plan_chunks
    from graphcore.execute.plan import (
        check_targets,
        make_tasks,
        output_frames,
        protected_paths,
    )
    from graphcore.validate import load_graph

    reg = _registry(args.plugins)
    loaded = load_graph(args.graph, sets=args.sets, defaults=args.defaults, registry=reg)
    _print_warnings(loaded.warnings)
    ev = Evaluator(loaded.graph, reg)
    if not ev.sinks():
        raise InputError("nothing to render: the graph has no write node", file=args.graph, field="nodes",
                         fix="add a write node")
    frames = output_frames(ev, args.frames)
    check_targets(ev, make_tasks(ev, frames), protected_paths(ev))
    base = ["midframe", "run", os.path.abspath(args.graph)]
    for item in args.sets:
        base += ["--set", item]
    if args.defaults:
        base += ["--defaults", os.path.abspath(args.defaults)]
    for plugin in args.plugins:
        base += ["--plugin", plugin]
    if args.cache:
        base += ["--cache", os.path.abspath(args.cache)]
    if args.jobs:
        base += ["--jobs", str(args.jobs)]
    base.append("--resume")           # a retried chunk keeps the frames it finished
    chunks = plan_chunks(ev, frames, args.size, base)
    if args.json:
        doc = {"schema": "midframe.chunks", "version": 1, "graph": os.path.abspath(args.graph),
               "frames": [frames[0], frames[-1]], "size": args.size, "chunks": [c.as_json() for c in chunks]}
        print(json.dumps(doc, indent=2))
        return EXIT_OK
    for c in chunks:
        src = "; ".join(f"{nid} {r['frames']}" + (f" views {r['views']}" if "views" in r else "")
                        for nid, r in c.reads.items())
        print(f"# chunk {c.index + 1}/{len(chunks)}: frames {c.first}-{c.last}; reads {src or 'no files'}")
        print(shlex.join(c.command))
    return EXIT_OK


def cmd_cache(args: argparse.Namespace) -> int:
    import os
    import time

    from graphcore.cache import DiskCache

    if not os.path.isdir(args.dir):
        raise UsageError("no such cache folder", file=args.dir, field="dir",
                         fix="name the folder given to --cache")
    cache = DiskCache(args.dir)
    if args.action == "prune":
        removed, freed = cache.prune(args.max_size)
        left = cache.entries()
        print(f"{args.dir}: removed {removed} entries ({_human(freed)}); {len(left)} entries, "
              f"{_human(sum(e[2] for e in left))} left")
        return EXIT_OK
    damaged = 0
    if args.verify:
        for _, meta_path, _, _ in cache.entries():
            before = cache.stats.corrupt
            cache.get(meta_path.stem)
            damaged += cache.stats.corrupt - before
    entries = cache.entries()
    temps = list(cache.root.glob("??/.tmp-*"))
    total = sum(e[2] for e in entries)
    line = f"{args.dir}: {len(entries)} entries, {_human(total)}"
    if entries:
        now = time.time()
        ages = sorted(now - e[3] for e in entries)
        line += f"; last used {ages[0] / 3600:.1f} h to {ages[-1] / 3600:.1f} h ago"
    if temps:
        line += f"; {len(temps)} temporary files (unfinished writes)"
    if args.verify:
        line += f"; {damaged} damaged entries removed"
    print(line)
    return EXIT_OK


def _progress(args: argparse.Namespace):
    from graphcore.cli.progress import Progress

    if _JSON:
        from graphcore.cli.jsonlog import JsonProgress

        return lambda total: JsonProgress(total)
    return lambda total: Progress(total, quiet=args.quiet)


def cmd_run(args: argparse.Namespace) -> int:
    from graphcore.execute.render import render

    reg = _registry(args.plugins)
    outcome = render(args.graph, sets=args.sets, defaults=args.defaults, frames=args.frames, jobs=args.jobs,
                     cache_dir=args.cache, memory_bytes=args.memory << 20, plugins=args.plugins, registry=reg,
                     on_loaded=_print_warnings,
                     on_start=_progress(args), resume=args.resume, scheduler=args.scheduler)
    report = outcome.report
    failed = report.failed
    # in-betweens a blend made whole from the real frames (frame_fallback): listed at the end
    held = sorted({r.frame for r in report.results for w in r.warnings if "whole frame at" in w})
    if args.cache_limit is not None and args.cache:
        from graphcore.cache import DiskCache

        removed, freed = DiskCache(args.cache).prune(args.cache_limit)
        if removed:
            log.info("cache pruned to %s: %d entries removed (%s)", _human(args.cache_limit), removed, _human(freed))
    elif args.cache_limit is not None:
        raise UsageError("--cache-limit needs --cache DIR", field="--cache-limit", fix="add --cache DIR")
    if _JSON:
        from graphcore.cli.jsonlog import emit

        emit("summary", "error" if failed else "info", frames=len(outcome.frames), files=len(report.results),
             skipped=len(report.skipped), fallback_frames=held,
             failed=[{"frame": r.frame, "view": r.view, "node": r.node_id, "status": r.status,
                      "message": r.message} for r in failed],
             exit=report.exit_code)
        return report.exit_code
    if failed:
        def where(results) -> str:
            if any(r.view for r in results):      # per-view files: name each (frame, view)
                names = [r.where for r in results]
                return ", ".join(names[:12]) + (f" and {len(names) - 12} more" if len(names) > 12 else "")
            return f"frame(s) {compact_frames([r.frame for r in results])}"

        by_message: dict[str, list] = {}
        for r in failed:
            by_message.setdefault(r.message, []).append(r)
        for message, results in by_message.items():
            print(f"midframe: error: {where(results)}: {message}", file=sys.stderr)
        print(f"midframe: {len(failed)} of {len(report.results)} frames failed: {where(failed)}",
              file=sys.stderr)
        return report.exit_code
    if held:
        print(f"midframe: {len(held)} output frame(s) fell back whole to the real frames (vectors not trusted "
              f"there; see the warnings): {compact_frames(held)}", file=sys.stderr)
    done = len(report.results)
    frames = len(outcome.frames)
    sequences = len({(r.node_id, r.view) for r in report.results})   # one per sink, per view of a per-view sink
    outputs = f" ({done} files in {sequences} sequences)" if done != frames else ""
    skipped = len(report.skipped)
    resumed = f"; {skipped} complete already, skipped" if skipped else ""
    print(f"midframe: rendered {frames} frame{'s' if frames != 1 else ''}{outputs}{resumed}", file=sys.stderr)
    return EXIT_OK


def cmd_ops(args: argparse.Namespace) -> int:
    from graphcore.cli.describe import describe_operator, operators_markdown

    reg = _registry(args.plugins)
    if args.builtin:
        reg = reg.builtin_only()
    good, bad = reg.load_all()
    if args.markdown:
        print(operators_markdown(good), end="")
        return EXIT_OK
    if args.name:
        if args.name in bad:
            raise UsageError(str(bad[args.name]), field="NAME", fix="reinstall or fix the plugin package")
        if args.name not in good:
            import difflib

            close = difflib.get_close_matches(args.name, list(good), n=1)
            raise UsageError(f"no operator called '{args.name}'", field="NAME",
                             fix=(f"did you mean '{close[0]}'? " if close else "") + "`midframe ops` lists them")
        print(describe_operator(good[args.name]))
        return EXIT_OK
    width = max([len(n) for n in list(good) + list(bad)] + [4])
    for name in sorted(good):
        op = good[name]
        print(f"{name:<{width}}  v{op.version}  {op.summary}  [{op.source}]")
    for name in sorted(bad):
        print(f"{name:<{width}}  BROKEN  {bad[name]}")
    return EXIT_OK


def _write_text(path: str, text: str) -> None:
    """Write a command's --out file; a file-system error is an input error naming it."""
    from operators.io._common import write_failure_fix

    try:
        with open(path, "w") as fh:
            fh.write(text)
    except OSError as e:
        raise UsageError(f"cannot write the file: {e.strerror or e}", file=path, field="--out",
                         fix=write_failure_fix(path, code=e.errno or 0)) from None


def cmd_schema(args: argparse.Namespace) -> int:
    from graphcore.registry import default_registry
    from graphcore.schema.jsonschema import graph_json_schema

    reg = default_registry().builtin_only() if args.builtin else default_registry()
    text = json.dumps(graph_json_schema(reg), indent=2, sort_keys=True) + "\n"
    if args.out:
        _write_text(args.out, text)
    else:
        sys.stdout.write(text)
    return EXIT_OK


def cmd_graph(args: argparse.Namespace) -> int:
    from graphcore.cli.describe import graph_dot
    from graphcore.validate import load_graph

    reg = _registry(args.plugins)
    loaded = load_graph(args.graph, sets=args.sets, defaults=args.defaults, registry=reg, allow_unset=True)
    dot = graph_dot(loaded.document, reg)
    if args.format == "dot":
        if args.out:
            _write_text(args.out, dot)
        else:
            sys.stdout.write(dot)
        return EXIT_OK
    exe = shutil.which("dot")
    if exe is None:
        raise UsageError(f"drawing {args.format} needs Graphviz's 'dot' program, which is not installed",
                         field="--format", fix="install Graphviz (Debian: apt-get install graphviz) or use "
                         "--format dot")
    if not args.out:
        raise UsageError(f"--format {args.format} needs --out FILE", field="--out", fix="add --out graph."
                         + args.format)
    proc = subprocess.run([exe, f"-T{args.format}", "-o", args.out], input=dot.encode(), capture_output=True,
                          check=False)
    if proc.returncode != 0:
        raise UsageError(f"Graphviz's dot could not write the drawing: "
                         f"{proc.stderr.decode(errors='replace').strip() or 'exit status ' + str(proc.returncode)}",
                         file=args.out, field="--out", fix="check that the folder exists and is writable")
    return EXIT_OK


def cmd_demo(args: argparse.Namespace) -> int:
    from graphcore.demo.run import run_demo

    return run_demo(args.outdir, jobs=args.jobs)


def cmd_vectors(args: argparse.Namespace) -> int:
    from graphcore.cli.vectors import cmd_vectors as run_vectors

    return run_vectors(args)


COMMANDS = {"run": cmd_run, "vectors": cmd_vectors, "check": cmd_check, "chunks": cmd_chunks, "cache": cmd_cache,
            "explain": cmd_explain, "assess": cmd_assess,
            "ops": cmd_ops,
            "schema": cmd_schema, "graph": cmd_graph, "demo": cmd_demo}


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    level = logging.WARNING - 10 * min(args.verbose, 2)
    if args.command in ("run", "demo", "assess"):
        level = min(level, logging.INFO)
    global _JSON
    _JSON = args.log_format == "json"
    if _JSON:
        from graphcore.cli.jsonlog import JsonFormatter, emit, error_fields

        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(JsonFormatter())
        logging.basicConfig(level=level, handlers=[handler], force=True)
    else:
        logging.basicConfig(level=level, format="midframe: %(levelname)s: %(message)s", stream=sys.stderr)
    try:
        return COMMANDS[args.command](args)
    except GraphErrors as exc:
        if _JSON:
            emit("error", "error", message=exc.message, file=exc.file, exit=EXIT_INVALID,
                 problems=[error_fields(e) for e in exc.errors])
        else:
            print(exc.describe(), file=sys.stderr)
        return EXIT_INVALID
    except InputError as exc:
        if _JSON:
            emit("error", "error", exit=EXIT_INVALID, **error_fields(exc))
        else:
            print(f"midframe: error: {exc.describe()}", file=sys.stderr)
        return EXIT_INVALID
    except KeyboardInterrupt:
        print("midframe: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except MidframeError as exc:
        log.debug("internal failure", exc_info=True)
        if _JSON:
            emit("error", "error", message=f"internal error: {exc}", exit=EXIT_FAILURE)
        else:
            print(f"midframe: internal error: {exc}", file=sys.stderr)
        return EXIT_FAILURE
    except Exception:  # a bug: say so, with the traceback, and exit 1
        import traceback

        traceback.print_exc()
        print("midframe: internal error (a bug in midframe or a plugin; the traceback above helps report it)",
              file=sys.stderr)
        return EXIT_FAILURE


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
