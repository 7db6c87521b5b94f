"""The command of one Snakemake batch job: hand the job to the run's starter, or run it.

``python -m pesflow.execution.jobstart [--starter ADDRESS] TASK DONE [batch options]``

With ``--starter`` (local runs, :mod:`pesflow.execution.starter`), the job runs in a fork
of the starter, which has imported PySCF already; this process passes on its arguments,
working folder and output files, forwards SIGINT, SIGTERM and SIGHUP to the job, and exits
with the job's status.  Without one, or when the starter refuses or is gone before the job
began, this process becomes ``python -m pesflow.execution.batch`` with the same
arguments.  This module imports nothing heavy: it is what every job starts with.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import sys

#: Exit status when the job's process ended without reporting one (it was killed).
KILLED = 128 + signal.SIGTERM


def _threads(argv: list[str]) -> int:
    if "--threads" in argv:
        return int(argv[argv.index("--threads") + 1])
    return 1


def hand_over(address: str, argv: list[str]) -> int | None:
    """Run the job in a fork of the starter at ``address``; its exit status, or None when
    the starter did not take it (nothing has run: the caller runs it itself)."""
    request = {"argv": argv, "cwd": os.getcwd(), "threads": _threads(argv)}
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as sock:
        try:
            sock.connect("\0" + address)
            socket.send_fds(sock, [json.dumps(request).encode()], [1, 2])
            reader = sock.makefile("rb")
            reply = json.loads(reader.readline() or b"{}")
            pid = int(reply["pid"])
        except (OSError, ValueError, KeyError, TypeError):
            return None  # nothing has run
        with reader:  # the job runs from here on: never None again
            return _wait(pid, reader)


def _wait(pid: int, reader) -> int:
    """Forward signals to the job ``pid`` until it reports its exit status."""
    print(f"pesflow: batch job in process {pid}, forked from the job starter", file=sys.stderr)
    sys.stderr.flush()

    def forward(signum, frame):
        try:
            os.kill(pid, signum)
        except ProcessLookupError:
            pass

    for sig in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP):
        signal.signal(sig, forward)
    try:
        line = reader.readline()
    except OSError:
        line = b""
    try:
        return int(json.loads(line)["exit"])
    except (ValueError, KeyError, TypeError):
        print("pesflow: the batch job ended without an exit status (killed)", file=sys.stderr)
        return KILLED


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    address = None
    if "--starter" in argv:
        at = argv.index("--starter")
        address = argv[at + 1]
        del argv[at : at + 2]
    code = hand_over(address, argv) if address else None
    if code is None:
        sys.stdout.flush()
        sys.stderr.flush()
        os.execv(sys.executable, [sys.executable, "-m", "pesflow.execution.batch", *argv])
    return code


if __name__ == "__main__":
    sys.exit(main())
