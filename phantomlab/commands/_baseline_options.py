"""The baseline-cache options of ``fit`` and ``batch measure``, and the build's progress bar (layer 5).

The default srdr/sfdi fit builds the cached Monte Carlo baseline it needs on first use
(``phantomlab.calibration.baseline_cache``): about a minute, shown as a progress bar on
stderr (stdout keeps the table or the one JSON object).  Ctrl-C stops the build between two
groups of photons; nothing is written (``phantomlab.cli`` prints one line and exits 130).

While the bar runs, Ctrl-C is also remembered: the KeyboardInterrupt Python raises where the
signal lands can be lost inside compiled code (seen once under heavy load: the build ran to
the end), so the bar raises it again at its next step.
"""

from __future__ import annotations

import signal
import sys
import threading
import time

__all__ = ["add_baseline_options", "ProgressBar", "BASELINE_DIR_ENV"]

#: The environment variable naming the baseline cache folder, for the options' help.  The same
#: name as :data:`phantomlab.calibration.baseline_cache.BASELINE_DIR_ENV` (a test holds them
#: equal), written here so that registering the options does not load the Monte Carlo engine
#: that module imports (numba, about 0.3 s of every ``phantomlab --help``).
BASELINE_DIR_ENV = "PHANTOMLAB_BASELINE_DIR"


def add_baseline_options(parser) -> None:
    """``--rebuild`` and ``--baseline-dir`` (the cache folder; the environment variable otherwise)."""
    parser.add_argument("--rebuild", action="store_true",
                        help="build the cached Monte Carlo baseline again, replacing one that is refused "
                        "(damaged, another version, other indices)")
    parser.add_argument("--baseline-dir", default=None, metavar="FOLDER",
                        help=f"folder of the cached Monte Carlo baselines (default: ${BASELINE_DIR_ENV}, else the "
                        "user cache folder; see phantomlab baseline list)")


class ProgressBar:
    """``progress(done, total)`` for a baseline build: a bar on stderr, redrawn in place on a terminal.

    Off a terminal (a log file, CI) it prints a line at every tenth instead.
    """

    WIDTH = 30

    def __init__(self, stream=None, *, title="building the Monte Carlo baseline for this fit (once; Ctrl-C stops "
                 "it, nothing is written)"):
        self.stream = sys.stderr if stream is None else stream
        self.title = title
        self.started = None
        self.tenths = -1
        self.interrupted = False
        self.previous_handler = None

    def _remember_ctrl_c(self) -> None:
        """Install a SIGINT handler that notes the press and raises KeyboardInterrupt as Python does."""
        if threading.current_thread() is not threading.main_thread():
            return

        def pressed(signum, frame):
            self.interrupted = True
            raise KeyboardInterrupt

        self.previous_handler = signal.signal(signal.SIGINT, pressed)

    def _restore(self) -> None:
        if self.previous_handler is not None:
            signal.signal(signal.SIGINT, self.previous_handler)
            self.previous_handler = None

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if self.interrupted:  # a press whose KeyboardInterrupt was lost on the way
            self._restore()
            raise KeyboardInterrupt
        if self.started is None:
            self.started = now
            self._remember_ctrl_c()
            self.stream.write(self.title + "\n")
        if done >= total:
            self._restore()
        share = done / total if total else 1.0
        filled = int(round(self.WIDTH * share))
        line = (f"[{'#' * filled}{'.' * (self.WIDTH - filled)}] {100 * share:3.0f} %  {done:,} of {total:,} "
                f"photons  {now - self.started:.0f} s")
        interactive = getattr(self.stream, "isatty", lambda: False)()
        if interactive:
            self.stream.write("\r" + line + ("\n" if done >= total else ""))
        elif int(10 * share) > self.tenths:
            self.tenths = int(10 * share)
            self.stream.write(line + "\n")
        self.stream.flush()
