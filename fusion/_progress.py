"""Progress of long steps: one helper for the campaign, the lock-in and the correlation.

On a terminal a tqdm bar on stderr; elsewhere (a log file, a pipe) a plain line at
every quarter; nothing at all when progress is off (``fusion -q``, or the library
called without ``progress=True``).
"""

from __future__ import annotations

import sys
import threading

from tqdm import tqdm

__all__ = ["Progress"]


class Progress:
    """Progress of ``total`` units of work.

    Parameters
    ----------
    total : int
        Units of the whole job.
    desc : str
        What is done (``"lock-in"``, ``"campaign"``).
    unit : str
        Name of a unit (``"frames"``, ``"runs"``, ``"points"``).
    enabled : bool
        False: silent.
    stream : file, optional
        Where to write (default ``sys.stderr``).
    leave : bool
        Keep the finished bar on the terminal (default) or erase it.
    lines : bool
        Away from a terminal, write a line at every quarter (False: the caller writes
        its own lines, as the campaign does one per finished run).
    """

    def __init__(self, total, *, desc: str, unit: str, enabled: bool = True, stream=None, leave: bool = True,
                 lines: bool = True):
        self.stream = stream if stream is not None else sys.stderr
        self.total = max(int(total), 0)
        self.desc, self.unit = desc, unit
        self.enabled = bool(enabled)
        self.lines = bool(lines)
        self.done = 0
        self._quarter = 0
        self._lock = threading.Lock()
        isatty = getattr(self.stream, "isatty", None)
        self._bar = None
        if self.enabled and isatty is not None and isatty():
            self._bar = tqdm(total=self.total, desc=desc, unit=f" {unit}", file=self.stream, leave=leave,
                             dynamic_ncols=True, smoothing=0.1)

    @property
    def is_bar(self) -> bool:
        """True when a bar is drawn (a terminal)."""
        return self._bar is not None

    def update(self, n: int = 1) -> None:
        """``n`` more units done."""
        self.advance_to(self.done + n)

    def advance_to(self, done: int) -> None:
        """``done`` units done in all."""
        if not self.enabled:
            return
        with self._lock:
            step, self.done = done - self.done, done
            if self._bar is not None:
                self._bar.update(step)
                return
            quarter = 4 * done // max(self.total, 1)
            if self.lines and quarter > self._quarter:
                self._quarter = quarter
                self.stream.write(f"{self.desc}: {min(100, 25 * quarter)} % ({done}/{self.total} {self.unit})\n")
                self.stream.flush()

    def note(self, text: str) -> None:
        """A line of text (above the bar on a terminal)."""
        if not self.enabled:
            return
        with self._lock:
            if self._bar is not None:
                self._bar.write(text, file=self.stream)
            else:
                self.stream.write(text + "\n")
                self.stream.flush()

    def postfix(self, text: str) -> None:
        """Short text after the bar (``"1 failed"``); nothing without a bar."""
        if self._bar is not None:
            with self._lock:
                self._bar.set_postfix_str(text)

    def close(self) -> None:
        if self._bar is not None:
            with self._lock:
                self._bar.close()
                self._bar = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
