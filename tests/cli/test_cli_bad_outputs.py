"""Bad output folders (issue 6): a disk that fills during a write and a folder that refuses writes
give a clear error naming the file, exit status 2, every other frame still rendered, and no
partial file at any final path. Simulated by failing the file system calls (the tests run as root,
where a read-only mode bit would not stop a write)."""

from __future__ import annotations

import errno
import os

import numpy as np

import operators.io.exr as exr_module
from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli, raw_channels
from tests.conftest import GRAPHS


def convert(src: str, dst: str):
    return cli("run", str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set", f"dst={dst}")


def test_disk_full_during_one_write_leaves_no_partial_file(tmp_path, monkeypatch):
    src = sequence(tmp_path / "src", 4, np.float32)
    real = exr_module.write_exr

    def full_on_1003(path, image, **kw):
        if path.endswith("o.1003.exr"):                       # the temporary file for frame 1003
            with open(path, "wb") as fh:
                fh.write(b"\0" * 100)                        # half-written, then the disk is full
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), path)
        return real(path, image, **kw)

    monkeypatch.setattr(exr_module, "write_exr", full_on_1003)
    out = tmp_path / "out"
    rc, _, err = convert(src, f"{out}/o.%04d.exr")
    assert rc == 2 and "Traceback" not in err
    assert "o.1003.exr" in err and "No space left on device" in err and "free space" in err
    assert sorted(p.name for p in out.iterdir()) == ["o.1001.exr", "o.1002.exr", "o.1004.exr"]   # no temp left
    for k in (1001, 1002, 1004):
        assert raw_channels(out / f"o.{k}.exr")["R"].shape == (48, 64)


def test_folder_refusing_writes_is_a_clear_error(tmp_path, monkeypatch):
    # the file system refuses to put the finished frame in place (read-only remount, lost permission)
    src = sequence(tmp_path / "src", 2, np.float32)
    out = tmp_path / "out"
    out.mkdir()
    real_replace = os.replace

    def refuse(a, b, *args, **kw):
        if str(b).startswith(str(out)):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(b))
        return real_replace(a, b, *args, **kw)

    monkeypatch.setattr(os, "replace", refuse)
    rc, _, err = convert(src, f"{out}/o.%04d.exr")
    assert rc == 2 and "Traceback" not in err
    assert "o.1001.exr" in err and "Read-only file system" in err
    assert list(out.iterdir()) == []                          # no frame, no temporary file left
