"""Batch jobs forked from a process that has imported PySCF already (local runs).

Every Snakemake job of a local run is a new Python process whose imports (PySCF, NumPy,
pyarrow, pandas through pyarrow, pesflow's engine and store) take about half a second
before its first point, on each core.  :class:`JobStarter` starts
``python -m pesflow.execution.starter`` as soon as ``pesflow run`` knows there is work: the
starter listens on a Unix socket at once, imports all that while Snakemake starts, then
forks one child per job.  The job's command (:mod:`pesflow.execution.jobstart`, a client
that imports nothing heavy) sends the starter its arguments, its working folder and its
output files (the job log, SCM_RIGHTS); the forked child runs
:func:`pesflow.execution.batch.main` exactly as ``python -m pesflow.execution.batch`` does
and reports its exit status back.  A fork of a process that has only imported these
libraries is what ``multiprocessing``'s fork start method does; no thread pool or OpenMP
region has run in the starter.

The client forwards SIGINT, SIGTERM and SIGHUP to its child, and a child whose client
disappears (killed) stops itself as on SIGTERM; each child writes its points exactly as a
job started from scratch does, so durability and resuming are the same.  The client runs
the job itself (a fresh process) when there is no starter: cluster runs, a starter that
refuses (another thread count) or is gone, or ``PESFLOW_JOB_STARTER=0``.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import traceback
import uuid

#: Largest request the starter reads (bytes of JSON).
MAX_REQUEST = 1 << 16
#: How often the starter checks that ``pesflow run`` is still alive (seconds).
PARENT_CHECK_S = 1.0


def enabled() -> bool:
    """False when ``PESFLOW_JOB_STARTER`` is ``0`` (every job then starts from scratch)."""
    return os.environ.get("PESFLOW_JOB_STARTER", "1").strip() != "0"


class JobStarter:
    """The starter process of one local run; ``address`` goes into each job's command.

    ``threads``: PySCF threads of each job (the starter's ``OMP_NUM_THREADS``, fixed
    before OpenMP starts); ``env``: the environment of the jobs (Snakemake's).
    """

    def __init__(self, threads: int, env: dict | None = None):
        self.threads = int(threads)
        # An abstract socket (Linux): no file to clean up, no path-length limit.
        self.address = f"pesflow-starter-{os.getpid()}-{uuid.uuid4().hex[:12]}"
        env = dict(os.environ if env is None else env)
        # as the job's command line sets it (workflows/rules/batch.smk), whatever the
        # caller's environment says: OpenMP reads it once, before the fork
        env["OMP_NUM_THREADS"] = str(self.threads)
        # Bound here, before the starter runs: a job that connects while the starter is
        # still importing waits in the backlog rather than finding no socket.
        listener = _listen(self.address)
        try:
            self.proc = subprocess.Popen(
                [
                    sys.executable,
                    "-m",
                    "pesflow.execution.starter",
                    str(listener.fileno()),
                    str(self.threads),
                    str(os.getpid()),
                ],
                pass_fds=(listener.fileno(),),
                stdin=subprocess.DEVNULL,
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
                env=env,
            )
        finally:
            listener.close()  # the starter holds it now

    def stop(self) -> None:
        """End the starter (its children, the jobs, have ended or end on their own)."""
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()


def _listen(address: str) -> socket.socket:
    listener = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    listener.bind("\0" + address)
    listener.listen(64)  # jobs that connect while the imports run wait here
    return listener


def _preload() -> None:
    """What a job imports before its first point (measured with ``python -X importtime``)."""
    import pyarrow  # noqa: F401
    import pyarrow.parquet  # noqa: F401

    try:  # pyarrow imports pandas on its first array; here, not in every job
        import pandas  # noqa: F401
    except ImportError:
        pass
    import pyscf.mp  # noqa: F401
    import pyscf.scf  # noqa: F401

    import pesflow.engine.pyscf.engine  # noqa: F401
    import pesflow.execution.batch  # noqa: F401
    import pesflow.store.compaction  # noqa: F401
    import pesflow.store.writer  # noqa: F401


def serve(listener: socket.socket, threads: int, parent: int) -> None:
    """The starter: import, then fork a child for each job that asks on ``listener``, as
    long as its parent ``parent`` (``pesflow run``) lives."""
    _preload()
    # Ended by JobStarter.stop (SIGTERM): the children are reaped first, so that their CPU
    # time is counted in this process's and so in pesflow run's (benchmarks read it).
    signal.signal(signal.SIGTERM, lambda signum, frame: sys.exit(0))
    listener.settimeout(PARENT_CHECK_S)
    try:
        while os.getppid() == parent:  # ends when pesflow run is gone
            _reap()
            try:
                conn, _ = listener.accept()
            except TimeoutError:
                continue
            _start_job(listener, conn, threads)
    finally:
        _reap()


def _reap() -> None:
    """Collect the children (jobs) that have ended."""
    while True:
        try:
            pid, _ = os.waitpid(-1, os.WNOHANG)
        except ChildProcessError:
            return
        if pid == 0:
            return


def _start_job(listener: socket.socket, conn: socket.socket, threads: int) -> None:
    """Read one job's request from ``conn`` and fork its child (or refuse it)."""
    conn.settimeout(None)
    fds = []
    try:
        message, fds, _, _ = socket.recv_fds(conn, MAX_REQUEST, 2)
        request = json.loads(message)
        if request.get("threads") != threads or len(fds) != 2:
            refusal = {"refused": f"this starter runs {threads} threads"}
            conn.sendall(json.dumps(refusal).encode())
        elif os.fork() == 0:
            listener.close()
            _child(conn, fds, request)  # never returns
    except (OSError, ValueError):
        pass
    finally:
        conn.close()
        for fd in fds:
            os.close(fd)


def _child(conn: socket.socket, fds: list[int], request: dict) -> None:
    """One job in a fork of the starter: its streams, its folder, batch.main, its status."""
    code = 1
    try:
        for sig in (signal.SIGCHLD, signal.SIGTERM, signal.SIGHUP):
            signal.signal(sig, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.default_int_handler)
        devnull = os.open(os.devnull, os.O_RDONLY)
        os.dup2(devnull, 0)
        os.close(devnull)
        os.dup2(fds[0], 1)
        os.dup2(fds[1], 2)
        for fd in fds:
            os.close(fd)
        os.chdir(request["cwd"])
        conn.sendall(json.dumps({"pid": os.getpid()}).encode() + b"\n")
        threading.Thread(target=_stop_without_client, args=(conn,), daemon=True).start()
        from pesflow.execution import batch

        code = batch.main(request["argv"])
    except SystemExit as done:
        code = done.code if isinstance(done.code, int) else (0 if done.code is None else 1)
    except BaseException:  # reported in the job's log, as a job started from scratch does
        traceback.print_exc()
        code = 1
    finally:
        try:
            import logging

            logging.shutdown()
            sys.stdout.flush()
            sys.stderr.flush()
            conn.sendall(json.dumps({"exit": code}).encode() + b"\n")
        except BaseException:
            pass
        os._exit(code)


def _stop_without_client(conn: socket.socket) -> None:
    """The client never sends after its request: end of file means it is gone (killed),
    and nobody waits for this job any more; stop as on SIGTERM."""
    try:
        while conn.recv(1):
            pass
    except OSError:
        pass
    os.kill(os.getpid(), signal.SIGTERM)


def main(argv=None) -> int:
    fd, threads, parent = (int(a) for a in (argv or sys.argv[1:])[:3])
    try:
        serve(socket.socket(fileno=fd), threads, parent)
    except SystemExit:  # JobStarter.stop: the children are reaped
        pass
    # Without the interpreter's tear-down of PySCF, pandas and pyarrow (~0.15 s), which
    # pesflow run would wait for at its end.
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(0)


if __name__ == "__main__":
    sys.exit(main())
