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
the two ways of starting Snakemake are the same process from then on, up to its exit: the
child does not wait for the timer thread Snakemake's scheduler may leave behind (about a
second at the end of every run).
"""

from __future__ import annotations

import json
import logging
import os
import socket
import subprocess
import sys

#: Largest command line the child reads (bytes of JSON).
_MAX_MESSAGE = 1 << 20
#: The child's flag for a run on this machine: Snakemake's own executors only.
_LOCAL = "--local"


def _builtin_executors_only() -> None:
    """Make Snakemake's executor registry hold only its own executors (local, dryrun,
    touch), not the installed executor plugins.

    Snakemake imports every installed ``snakemake_executor_plugin_*`` when it starts, and
    the SLURM plugin then asks ``scontrol show config`` (a 10 s time-out where SLURM's
    client tools are installed but no controller answers) and imports pandas (~0.3 s).
    A local run uses none of them.  Must run before ``snakemake.cli`` is imported.
    """
    from snakemake_interface_executor_plugins.registry import ExecutorPluginRegistry

    def collect_plugins(self):
        from snakemake.executors import dryrun, local, touch

        self.plugins = {}
        self.register_plugin("local", local)
        self.register_plugin("dryrun", dryrun)
        self.register_plugin("touch", touch)

    ExecutorPluginRegistry.collect_plugins = collect_plugins


class WarmSnakemake:
    """A Snakemake child that has imported Snakemake and waits for its command line.

    ``env``: the child's environment (fixed now: it is the environment of Snakemake and,
    through it, of every job).
    """

    def __init__(self, env: dict | None = None, *, local: bool = False):
        self.started = False
        self._sock, child = socket.socketpair()
        argv = [sys.executable, "-m", "pesflow.execution.warm", str(child.fileno())]
        if local and not (env if env is not None else os.environ).get("SNAKEMAKE_PROFILE"):
            argv.append(_LOCAL)
        try:
            self.proc = subprocess.Popen(
                argv,
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


#: What Snakemake imports only once it runs pesflow's workflow (its source cache's URI
#: parsing, the config schema's validation), measured as the modules new in
#: ``sys.modules`` after a run: imported while the parent plans instead.
_RUN_IMPORTS = ("smart_open", "jsonschema", "snakemake.storage", "graphlib", "packaging.version")


def _prewarm() -> None:
    """Do before the command line comes what Snakemake does first with every command line:
    build its argument parser, which collects its plugin registries (the report plugins'
    imports Snakemake's report package; ~0.16 s), and import :data:`_RUN_IMPORTS` (~0.12 s).
    The registries are kept, so ``snakemake.cli.main`` finds them collected.  Only a head
    start: anything that fails here is left for Snakemake to do (and report) itself."""
    import importlib

    import snakemake.cli

    try:
        snakemake.cli.get_argument_parser()
    except Exception:
        pass
    for name in _RUN_IMPORTS:
        try:
            importlib.import_module(name)
        except Exception:
            pass


def main(argv=None) -> int:
    argv = argv or sys.argv[1:]
    sock = socket.socket(fileno=int(argv[0]))
    if _LOCAL in argv[1:]:
        _builtin_executors_only()
    import snakemake.cli  # the slow part, done while the parent plans

    _prewarm()

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
    try:
        snakemake.cli.main(args)  # ends with SystemExit(Snakemake's status)
        code = 0
    except SystemExit as done:
        code = done.code if isinstance(done.code, int) else (0 if done.code is None else 1)
    # Snakemake's work is done and logged.  Its scheduler may leave a threading.Timer (the
    # job rate limiter's re-evaluation, about a second) that a normal exit waits for; the
    # log handlers and streams are flushed here and the process ends without that wait.
    logging.shutdown()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


if __name__ == "__main__":
    sys.exit(main())
