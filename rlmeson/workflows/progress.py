"""Progress of a loop over many points (scans, fits): a bar on a terminal, one line per
step in a log, nothing when quiet.

    from rlmeson.workflows.progress import bar

    with bar(total=20, desc="scan", quiet=False, log=lines) as b:
        for ...:
            b.step("m = 0.004 GeV: ok [3.1 s]")

* the stream (default stderr) is a terminal: a tqdm bar, the last step's message beside it;
* otherwise (a log file, a pipe, a notebook's captured stderr): one line per step,
  ``[   12.3 s] desc 3/20: message``;
* ``quiet``: nothing on the stream.

Every step's line is also appended to ``log`` (a list), quiet or not, so a run directory's
log keeps it.  ``total`` may be None (a fit: the number of steps is not known ahead).
"""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager


class Bar:
    def __init__(self, total: int | None, desc: str, quiet: bool = False, log: list | None = None,
                 stream=None):
        self.total, self.desc, self.quiet, self.log = total, desc, quiet, log
        self.stream = sys.stderr if stream is None else stream
        self.count = 0
        self.t0 = time.perf_counter()
        self._tqdm = None
        if not quiet and _is_terminal(self.stream):
            from tqdm import tqdm

            self._tqdm = tqdm(total=total, desc=desc, file=self.stream, dynamic_ncols=True, leave=True)

    def line(self, message: str) -> str:
        of = f"/{self.total}" if self.total is not None else ""
        return f"[{time.perf_counter() - self.t0:7.1f} s] {self.desc} {self.count}{of}: {message}"

    def step(self, message: str = "", n: int = 1) -> None:
        """One (or ``n``) finished step(s), described by ``message``."""
        self.count += n
        text = self.line(message)
        if self.log is not None:
            self.log.append(text)
        if self.quiet:
            return
        if self._tqdm is not None:
            self._tqdm.set_postfix_str(message[:60], refresh=False)
            self._tqdm.update(n)
        else:
            print(text, file=self.stream, flush=True)

    def note(self, message: str) -> None:
        """A line that is not a step (a warning, a phase); kept in the log as well."""
        text = f"[{time.perf_counter() - self.t0:7.1f} s] {message}"
        if self.log is not None:
            self.log.append(text)
        if self.quiet:
            return
        if self._tqdm is not None:
            self._tqdm.write(text, file=self.stream)
        else:
            print(text, file=self.stream, flush=True)

    def close(self) -> None:
        if self._tqdm is not None:
            self._tqdm.close()
            self._tqdm = None


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


@contextmanager
def bar(total: int | None, desc: str, quiet: bool = False, log: list | None = None, stream=None):
    """A :class:`Bar` that is closed on leaving the block (also on an error)."""
    b = Bar(total, desc, quiet, log, stream)
    try:
        yield b
    finally:
        b.close()
