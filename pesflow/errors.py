"""Typed errors raised by pesflow.

Each error says in its docstring when it is raised.  The command line turns
:class:`SpecError` into exit code 2 with a one-line message; errors during a
calculation are recorded on the point instead of being raised out of a batch.
"""

import re

#: Every character str.splitlines() breaks a line at.
_LINE_BREAK = re.compile("[\n\r\v\f\x1c\x1d\x1e\x85\u2028\u2029]")


class PesflowError(Exception):
    """Base class of every error pesflow raises on purpose."""


class SpecError(PesflowError):
    """Raised before anything runs, when a campaign spec is invalid.

    The message is one line: ``FILE[:LINE]: FIELD.PATH: what is wrong; what is allowed``.
    """

    def __init__(self, message, file=None, line=None, field=None):
        self.file = None if file is None else str(file)
        self.line = line
        self.field = field
        self.reason = message
        super().__init__(self.format())

    def format(self):
        where = self.file or "<spec>"
        if self.line is not None:
            where = f"{where}:{self.line}"
        text = f"{where}: {self.field}: {self.reason}" if self.field else f"{where}: {self.reason}"
        # One line, whatever the spec's keys and values hold: line breaks are shown escaped.
        return _LINE_BREAK.sub(lambda m: m.group(0).encode("unicode_escape").decode(), text)


class EngineSetupError(PesflowError):
    """Raised before a calculation starts, when the backend cannot set it up
    (unknown basis for an element, impossible spin, unknown functional)."""


class ConvergenceError(PesflowError):
    """Raised during a calculation when the SCF (or a correlated step, or a
    constrained optimisation) does not converge after every configured attempt."""


class StoreError(PesflowError):
    """Raised when the point store cannot be used (wrong schema version,
    unwritable folder).  A single corrupt fragment is not an error: it is
    quarantined, reported and recomputed."""


class RunError(PesflowError):
    """Raised by ``pesflow run`` when the workflow cannot be started, e.g. because
    another run of the same campaign is alive."""
