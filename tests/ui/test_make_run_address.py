"""``make run`` serves the page on the loopback interface only, unless asked otherwise.

Starts the page exactly as README's first command does (``make run``, here with a free port
and a database in the test's temporary folder), waits for it to answer, and reads the
kernel's socket table (/proc/net/tcp and tcp6) for the listening sockets on that port: the
only one must be 127.0.0.1.  A page listening on every interface would expose a writable
lab database to the network (README, "Serving the page to a lab network").
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import time
import urllib.request
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parents[2]
STAMP = REPO_ROOT / ".venv" / ".installed-stamp"
START_TIMEOUT_S = 90
LISTEN = "0A"  # TCP state LISTEN in /proc/net/tcp


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _listening_addresses(port: int) -> list[str]:
    """Local addresses (hex, as the kernel prints them) of sockets listening on ``port``."""
    found = []
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        path = Path(table)
        if not path.exists():
            continue
        for line in path.read_text().splitlines()[1:]:
            fields = line.split()
            address, hex_port = fields[1].rsplit(":", 1)
            if int(hex_port, 16) == port and fields[3] == LISTEN:
                found.append(address)
    return found


@pytest.mark.skipif(not STAMP.exists(), reason="needs the .venv that `make test` creates")
@pytest.mark.skipif(not Path("/proc/net/tcp").exists(), reason="needs Linux's /proc/net/tcp")
def test_make_run_listens_on_loopback_only(tmp_path):
    port = _free_port()
    database = tmp_path / "lab.sqlite"
    command = ["make", "-s", "-o", str(STAMP.relative_to(REPO_ROOT)), "run", f"PORT={port}",
               f"DB=sqlite:///{database}"]
    log = (tmp_path / "make-run.log").open("w")
    process = subprocess.Popen(command, cwd=REPO_ROOT, stdout=log, stderr=subprocess.STDOUT,
                               start_new_session=True, env=dict(os.environ, PYTHONUNBUFFERED="1"))
    try:
        deadline = time.monotonic() + START_TIMEOUT_S
        while True:
            assert process.poll() is None, (tmp_path / "make-run.log").read_text()
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as answer:
                    if answer.status == 200:
                        break
            except OSError:
                pass
            assert time.monotonic() < deadline, "the page did not answer on 127.0.0.1"
            time.sleep(0.5)
        addresses = _listening_addresses(port)
        assert addresses, "no listening socket found for the page's port"
        # 0100007F is 127.0.0.1 in the kernel's byte order; any other (00000000 = every
        # interface, or an IPv6 address) would reach the network
        assert set(addresses) == {"0100007F"}, addresses
    finally:
        os.killpg(process.pid, signal.SIGTERM)
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(process.pid, signal.SIGKILL)
        log.close()


@pytest.mark.parametrize("variable", [None, "25"])
def test_make_run_caps_uploads_at_the_file_size_limit(variable):
    """Streamlit's own upload cap (200 MB) is replaced by the layers' file-size limit.

    ``make -n run`` prints the command it would run; its ``--server.maxUploadSize`` must be
    :func:`phantomlab.limits.limit` ``("file_mb")`` read under the same environment.
    """
    from phantomlab.limits import limit

    env = {key: value for key, value in os.environ.items() if key != "PHANTOMLAB_MAX_FILE_MB"}
    if variable is not None:
        env["PHANTOMLAB_MAX_FILE_MB"] = variable
    printed = subprocess.run(["make", "-n", "-o", ".venv/.installed-stamp", "run"], cwd=REPO_ROOT, env=env,
                             capture_output=True, text=True, check=True).stdout
    saved = os.environ.pop("PHANTOMLAB_MAX_FILE_MB", None)
    try:
        if variable is not None:
            os.environ["PHANTOMLAB_MAX_FILE_MB"] = variable
        expected = limit("file_mb")
    finally:
        os.environ.pop("PHANTOMLAB_MAX_FILE_MB", None)
        if saved is not None:
            os.environ["PHANTOMLAB_MAX_FILE_MB"] = saved
    assert f'--server.maxUploadSize "{expected}"' in printed
    assert expected == (10 if variable is None else 25)
