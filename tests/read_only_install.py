"""A copy of the obsprep package that cannot be written to, for the compiled kernels' disk-cache
tests: numba must then cache in the user's cache directory, or warn once and compile anew.

As root, mode bits do not stop writes: the subprocess then runs in a mount namespace of its own
(util-linux unshare) in which the package copy is bind-mounted read-only, so writes fail with
EROFS whoever makes them.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest

import obsprep

READ_ONLY_MOUNT = 'mount --bind "$0" "$0" && mount -o remount,bind,ro "$0" "$0" && exec "$1" -c "$2"'


def environment(pythonpath, **extra):
    """The test process's environment without numba or cache settings, and with these."""
    chosen = {k: v for k, v in os.environ.items() if not k.startswith(("NUMBA_", "XDG_"))}
    chosen.update(PYTHONPATH=pythonpath, **extra)
    return chosen


def can_mount_read_only() -> bool:
    """Whether a private read-only bind mount works here (and really stops writes)."""
    probe = tempfile.mkdtemp(prefix="obsprep-mount-probe-")
    try:
        result = subprocess.run(["unshare", "--mount", "sh", "-c", READ_ONLY_MOUNT, probe, "/bin/sh",
                                 f"touch {probe}/written"], capture_output=True)
        return (result.returncode != 0 and not os.path.exists(os.path.join(probe, "written"))
                and b"Read-only" in result.stderr)
    except OSError:
        return False
    finally:
        shutil.rmtree(probe)


@pytest.fixture()
def read_only_package():
    """A copy of the obsprep package under a directory that cannot be written to, and a home.

    Yields (site, read_only_root, home): ``site`` goes on PYTHONPATH, everything under
    ``read_only_root`` is read-only, ``home`` is writable.
    """
    if os.geteuid() == 0 and not can_mount_read_only():
        pytest.skip("running as root without a private read-only bind mount (unshare --mount)")
    top = Path(tempfile.mkdtemp(prefix="obsprep-readonly-"))
    read_only_root = top / "read-only"
    site = read_only_root / "site"
    shutil.copytree(Path(obsprep.__file__).parent, site / "obsprep",
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    home = top / "home"
    home.mkdir()
    for path in [read_only_root, *read_only_root.rglob("*")]:
        path.chmod(0o555 if path.is_dir() else 0o444)
    try:
        yield site, read_only_root, home
    finally:
        for path in [read_only_root, *read_only_root.rglob("*")]:
            path.chmod(0o755 if path.is_dir() else 0o644)
        shutil.rmtree(top)


def run_read_only(script: str, site, read_only_root, **extra) -> dict:
    """Run ``script`` (which prints one JSON line last) on the read-only copy; its result."""
    if os.geteuid() == 0:
        command = ["unshare", "--mount", "sh", "-c", READ_ONLY_MOUNT, str(read_only_root),
                   sys.executable, script]
    else:
        command = [sys.executable, "-c", script]
    result = subprocess.run(command, capture_output=True, text=True, cwd="/",
                            env=environment(str(site), **extra))
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout.splitlines()[-1])
