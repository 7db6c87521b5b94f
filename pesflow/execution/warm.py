"""A Snakemake process started before it is needed.

Snakemake's import takes about 0.8 s, and ``pesflow run`` spends about as long loading the
campaign and planning before it knows Snakemake's command line.  :class:`WarmSnakemake`
starts ``python -m pesflow.execution.warm`` at once: the child imports Snakemake while the
parent plans, then waits on a socket.  :meth:`WarmSnakemake.start` sends it the command
line together with two open files (SCM_RIGHTS): the log, which becomes its stdout and
stderr, and the run lock, which it holds from then on exactly as a Snakemake process
started with the lock in ``pass_fds`` would (one open file description, so the lock is
shared, not taken again).  :meth:`WarmSnakemake.cancel` (nothing to compute, or an error)
closes the socket and the child ends without having run anything.

The child runs ``snakemake.cli.main(argv)``, the function ``python -m snakemake`` runs, so
the two ways of starting Snakemake are the same process from then on.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys

#: Largest command line the child reads (bytes of JSON).
_MAX_MESSAGE = 1 << 20


class WarmSnakemake:
    """A Snakemake child that has imported Snakemake and waits for its command line.

    ``env``: the child's environment (fixed now: it is the environment of Snakemake and,
    through it, of every job).
    """

    def __init__(self, env: dict | None = None):
        self.started = False
        self._sock, child = socket.socketpair()
        try:
            self.proc = subprocess.Popen(
                [sys.executable, "-m", "pesflow.execution.warm", str(child.fileno())],
                pass_fds=(child.fileno(),),
                stdin=subprocess.DEVNULL,
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
                env=env,
            )
        finally:
            child.close()

    def start(self, argv: list[str], log_fd: int, lock_fd: int) -> subprocess.Popen | None:
        """Hand the child Snakemake's arguments (``argv`` without ``python -m snakemake``),
        the log and the run lock; returns the running process, or None when the child is
        gone (the caller then starts Snakemake the ordinary way)."""
        message = json.dumps(argv).encode()
        try:
            if self.proc.poll() is not None:
                return None
            socket.send_fds(self._sock, [message], [log_fd, lock_fd])
        except OSError:
            self.cancel()
            return None
        finally:
            self._sock.close()
        self.started = True
        return self.proc

    def cancel(self) -> None:
        """End the child unless :meth:`start` handed it a command line."""
        if self.started:
            return
        self._sock.close()
        if self.proc.poll() is None:
            self.proc.kill()  # it has run nothing yet; its import is all there is to stop
        self.proc.wait()


def main(argv=None) -> int:
    fd = int((argv or sys.argv[1:])[0])
    sock = socket.socket(fileno=fd)
    import snakemake.cli  # the slow part, done while the parent plans

    message, fds, _, _ = socket.recv_fds(sock, _MAX_MESSAGE, 2)
    sock.close()
    if not message:  # the parent cancelled (or died): nothing to run
        return 0
    log_fd, lock_fd = fds
    os.dup2(log_fd, 1)
    os.dup2(log_fd, 2)
    os.close(log_fd)
    # lock_fd stays open (not inherited by the jobs) until this process ends: the run lock
    args = json.loads(message)
    sys.argv = ["snakemake", *args]
    snakemake.cli.main(args)  # exits with Snakemake's status
    return 0


if __name__ == "__main__":
    sys.exit(main())
