"""Progress of a table build: a tqdm bar in a terminal or a notebook, a periodic log line
otherwise.

``progress=None`` (the default of every build) picks by where it runs: a terminal on stderr
gets a tqdm bar; a Jupyter kernel gets tqdm's notebook widget (or the plain bar where
ipywidgets is missing); anything else (a log file, a pipe, a batch job) gets one line on
stderr every :data:`LOG_INTERVAL` seconds, the first after that long, so that short builds
print nothing.  ``progress=True`` forces a bar, ``False`` silences it.  Without tqdm
installed a bar is a plain one-line bar of our own.
"""

from __future__ import annotations

import sys
import time

#: seconds between two log lines of a non-interactive build
LOG_INTERVAL = 10.0


def in_notebook() -> bool:
    """True inside a Jupyter kernel (IPython's ZMQ shell)."""
    shell = sys.modules.get("IPython")
    if shell is None or "ipykernel" not in sys.modules:
        return False
    try:
        ip = shell.get_ipython()
    except AttributeError:
        return False
    return ip is not None and type(ip).__name__ == "ZMQInteractiveShell"


def _tqdm(total: int, label: str, stream, notebook: bool):
    try:
        if notebook:
            try:
                from tqdm.notebook import tqdm
                return tqdm(total=total, unit=label, desc="table build")
            except ImportError:  # no ipywidgets: the text bar shows in the notebook too
                pass
        from tqdm import tqdm
    except ImportError:
        return None
    return tqdm(total=total, unit=" " + label, desc="table build", file=stream,
                dynamic_ncols=True, leave=True)


class Progress:
    """Progress of ``total`` states; ``update(n)`` after each block, ``close()`` at the end.

    Parameters
    ----------
    total : int
    enabled : bool or None
        None: by environment (module docstring); True: a bar; False: nothing.
    stream : file, optional
        Where bars and log lines go (default stderr).
    interval : float
        Seconds between log lines.
    """

    def __init__(self, total: int, enabled: bool | None = None, stream=None,
                 label: str = "states", interval: float = LOG_INTERVAL):
        self.stream = stream or sys.stderr
        self.total, self.done, self.label = total, 0, label
        self.start = time.perf_counter()
        self.interval = interval
        self._last_log = self.start
        self._bar = None
        self._plain = False
        if enabled is False:
            self.mode = "off"
        elif enabled is True or _isatty(self.stream) or in_notebook():
            self.mode = "bar"
            self._bar = _tqdm(total, label, self.stream, enabled is not True and in_notebook())
            self._plain = self._bar is None
            self._last = 0.0
        else:
            self.mode = "log"

    @property
    def enabled(self) -> bool:
        return self.mode != "off"

    def update(self, n: int) -> None:
        self.done += n
        if self.mode == "bar":
            if self._bar is not None:
                self._bar.update(n)
            else:
                self._plain_update()
        elif self.mode == "log":
            now = time.perf_counter()
            if now - self._last_log >= self.interval and self.done < self.total:
                self._last_log = now
                self.stream.write(self.log_line(now) + "\n")
                self.stream.flush()

    def log_line(self, now: float | None = None) -> str:
        """'sahaboltz: table build 40% (400 of 1,000 states), 12 s, about 18 s left'."""
        now = time.perf_counter() if now is None else now
        el = now - self.start
        frac = self.done / self.total if self.total else 1.0
        left = el / frac - el if frac > 0 else float("nan")
        return (f"sahaboltz: table build {100 * frac:.0f}% ({self.done:,} of {self.total:,} "
                f"{self.label}), {el:.0f} s, about {left:.0f} s left")

    def _plain_update(self) -> None:
        now = time.perf_counter()
        if now - self._last > 0.2 or self.done >= self.total:
            self._last = now
            frac = self.done / self.total if self.total else 1.0
            el = now - self.start
            eta = el / frac - el if frac > 0 else float("nan")
            bar = "#" * int(30 * frac)
            self.stream.write(f"\r[{bar:<30}] {100 * frac:5.1f}% {self.done}/{self.total} "
                              f"{self.label}  {el:6.1f} s, eta {eta:5.1f} s")
            self.stream.flush()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
        elif self._plain:
            self.stream.write("\n")
            self.stream.flush()


def _isatty(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


__all__ = ["Progress", "LOG_INTERVAL", "in_notebook"]
