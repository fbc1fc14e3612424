"""``midframe run --scheduler`` on Dask distributed (issue 6): a LocalCluster and a real
``dask scheduler`` with ``dask worker`` processes on 127.0.0.1 render the pixels of a serial render;
a killed client resumes; a worker killed mid-render is replaced by the other; an unreachable
scheduler is a clear error within seconds."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import raw_channels, write_plate
from tests.conftest import GRAPHS

RUN = [sys.executable, "-m", "graphcore", "run", str(GRAPHS / "retime.json"), "--set", "slowdown=2", "-q"]


def same_pixels(a, b) -> bool:
    x, y = raw_channels(a), raw_channels(b)
    return sorted(x) == sorted(y) and all(x[n].tobytes() == y[n].tobytes() for n in x)


def render(src: str, dst: str, *extra: str, timeout: float = 600) -> subprocess.CompletedProcess:
    return subprocess.run([*RUN, "--set", f"src={src}", "--set", f"dst={dst}", *extra], capture_output=True,
                          text=True, timeout=timeout)


def plates(folder: Path, n: int, h: int = 96, w: int = 128) -> str:
    """Seeded textures drifting by whole pixels: enough work per frame to see a render in flight."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(3)
    base = rng.random((h + 2 * n, w + 4 * n)).astype(np.float32)
    for i in range(n):
        crop = base[i:i + h, 2 * i:2 * i + w]
        write_plate(folder / f"p.{1001 + i}.exr", {"R": crop, "G": crop[::-1].copy(), "B": 0.5 * crop})
    return str(folder / "p.%04d.exr")


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    """A real scheduler and two single-threaded workers, as separate processes on 127.0.0.1."""
    d = tmp_path_factory.mktemp("dask")
    sched_file = d / "scheduler.json"
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    procs = [subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0",
                               "--no-dashboard", "--scheduler-file", str(sched_file)],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)]
    deadline = time.time() + 60
    while not sched_file.exists() and time.time() < deadline:
        time.sleep(0.1)
    address = json.loads(sched_file.read_text())["address"]
    procs.append(subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--nworkers", "2",
                                   "--nthreads", "1", "--no-dashboard", "--host", "127.0.0.1"],
                                  stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env))
    from dask.distributed import Client

    with Client(address, timeout=30) as c:
        c.wait_for_workers(2, timeout=60)
    yield address
    for p in procs[::-1]:
        p.send_signal(signal.SIGINT)
    for p in procs[::-1]:
        try:
            p.wait(timeout=20)
        except subprocess.TimeoutExpired:
            p.kill()


def test_local_cluster_renders_the_serial_pixels(tmp_path):
    src = sequence(tmp_path / "src", 4, np.float32)
    assert render(src, f"{tmp_path}/serial/o.%04d.exr").returncode == 0
    proc = render(src, f"{tmp_path}/dask/o.%04d.exr", "--scheduler", "local:2")
    assert proc.returncode == 0, proc.stderr
    for k in range(1001, 1008):
        assert same_pixels(tmp_path / "serial" / f"o.{k}.exr", tmp_path / "dask" / f"o.{k}.exr"), k


@pytest.mark.slow
def test_real_scheduler_with_two_workers_and_a_shared_cache(tmp_path, cluster):
    src = plates(tmp_path / "src", 6)
    assert render(src, f"{tmp_path}/serial/o.%04d.exr").returncode == 0
    proc = render(src, f"{tmp_path}/dask/o.%04d.exr", "--scheduler", cluster, "--cache", str(tmp_path / "cache"))
    assert proc.returncode == 0, proc.stderr
    for k in range(1001, 1012):
        assert same_pixels(tmp_path / "serial" / f"o.{k}.exr", tmp_path / "dask" / f"o.{k}.exr"), k
    assert any((tmp_path / "cache").glob("??/*.npy"))               # the workers filled the shared cache


@pytest.mark.slow
def test_killed_client_resumes_on_the_scheduler(tmp_path, cluster):
    src = plates(tmp_path / "src", 8)
    assert render(src, f"{tmp_path}/serial/o.%04d.exr").returncode == 0
    out = tmp_path / "dask"
    proc = subprocess.Popen([*RUN, "--set", f"src={src}", "--set", f"dst={out}/o.%04d.exr", "--scheduler", cluster],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.time() + 300
    while time.time() < deadline and not (out.exists() and any(p.name.startswith("o.") for p in out.iterdir())):
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=60)
    time.sleep(3)          # chunks already on the workers may still land: --resume takes whatever is there
    done = [p for p in out.iterdir() if p.name.startswith("o.")]
    assert done
    for p in done:
        assert same_pixels(p, tmp_path / "serial" / p.name)         # only complete frames
    resumed = render(src, f"{out}/o.%04d.exr", "--scheduler", cluster, "--resume")
    assert resumed.returncode == 0, resumed.stderr
    for k in range(1001, 1016):
        assert same_pixels(tmp_path / "serial" / f"o.{k}.exr", out / f"o.{k}.exr"), k


def test_unreachable_scheduler_is_a_clear_error_within_seconds(tmp_path):
    src = sequence(tmp_path / "src", 2, np.float32)
    t0 = time.time()
    proc = render(src, f"{tmp_path}/o.%04d.exr", "--scheduler", "tcp://127.0.0.1:9", timeout=120)
    assert proc.returncode == 2 and time.time() - t0 < 60
    assert "cannot reach the Dask scheduler" in proc.stderr and "Traceback" not in proc.stderr
    assert not list(tmp_path.glob("o.*.exr"))
    bad = render(src, f"{tmp_path}/o.%04d.exr", "--scheduler", "local:0")
    assert bad.returncode == 2 and "local:N" in bad.stderr


@pytest.mark.slow
def test_a_worker_killed_mid_render_is_replaced(tmp_path, cluster):
    """SIGKILL one of the two workers while chunks are in flight: Dask runs its chunk again on the
    other (or on the restarted one); the render still succeeds with the serial pixels."""
    from dask.distributed import Client

    src = plates(tmp_path / "src", 8)
    assert render(src, f"{tmp_path}/serial/o.%04d.exr").returncode == 0
    out = tmp_path / "dask"
    proc = subprocess.Popen([*RUN, "--set", f"src={src}", "--set", f"dst={out}/o.%04d.exr", "--scheduler", cluster],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    with Client(cluster, timeout=30) as c:
        pids = c.run(os.getpid)
    deadline = time.time() + 300
    while time.time() < deadline and not (out.exists() and any(p.name.startswith("o.") for p in out.iterdir())):
        time.sleep(0.05)
    os.kill(sorted(pids.values())[0], signal.SIGKILL)
    _, err = proc.communicate(timeout=600)
    assert proc.returncode == 0, err
    for k in range(1001, 1016):
        assert same_pixels(tmp_path / "serial" / f"o.{k}.exr", out / f"o.{k}.exr"), k
    with Client(cluster, timeout=30) as c:                    # the nanny brought the worker back
        c.wait_for_workers(2, timeout=60)
