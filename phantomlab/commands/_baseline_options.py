"""The baseline-cache options of ``fit`` and ``batch measure``, and the build's progress bar (layer 5).

The default srdr/sfdi fit builds the cached Monte Carlo baseline it needs on first use
(``phantomlab.calibration.baseline_cache``): about half a minute, shown as a progress bar on
stderr (stdout keeps the table or the one JSON object).  Ctrl-C stops the build between two
groups of photons; nothing is written (``phantomlab.cli`` prints one line and exits 130).
"""

from __future__ import annotations

import sys
import time

__all__ = ["add_baseline_options", "ProgressBar"]


def add_baseline_options(parser) -> None:
    """``--rebuild`` and ``--baseline-dir`` (the cache folder; the environment variable otherwise)."""
    from phantomlab.calibration.baseline_cache import BASELINE_DIR_ENV

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

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if self.started is None:
            self.started = now
            self.stream.write(self.title + "\n")
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
