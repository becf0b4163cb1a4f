"""The bad-input corpus (tests/hardening/bad_input_corpus.py) through the command line, in-process.

For every case: exit status 2 with exactly one line ``phantomlab: error: ...`` on stderr and
nothing on stdout (so no traceback), done within 10 s (a guard against hangs, not a speed
target), the planted marker never shown, and nothing written: no new or changed file in the
case's folder or the working folder, no database file created, no row added to the log.
"""

from __future__ import annotations

import collections
import json
import os
import shutil
import signal
import time
from pathlib import Path

import pytest

from phantomlab.cli import main
from phantomlab.store import open_store
from phantomlab.store.schema import Base

import bad_input_corpus as corpus
from bad_input_corpus import BATCH, DB, NEW_DB, SECRET, WORK

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")

#: A case that runs longer than this is a hang [s].
HANG_S = 10.0
FAMILIES = ("cli", "recipe", "stock", "measurement", "sidecar", "amounts", "baseline", "archive")
AMOUNTS = "stock,volume_ml\nwater,480\nlipid20,20\nink_black,0.05\ndye_nir,0.05\n"


class _Hang(BaseException):
    pass


def _counts(url: str) -> dict[str, int]:
    from sqlalchemy import func, select

    store = open_store(url)
    try:
        with store.reading() as session:
            return {t.name: session.scalar(select(func.count()).select_from(t)) for t in Base.metadata.sorted_tables}
    finally:
        store.close()


def _snapshot(*folders: Path) -> dict:
    seen = {}
    for folder in folders:
        for path in folder.rglob("*"):
            if ".sqlite" in path.name:  # the log: checked by its rows (a read may checkpoint its WAL)
                continue
            info = path.lstat()
            seen[str(path)] = (info.st_size, info.st_mtime_ns)
    return seen


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A batch log with one batch (amounts recorded, a measurement attached) and its archive."""
    folder = tmp_path_factory.mktemp("corpus-lab")
    url = f"sqlite:///{folder / 'lab.sqlite'}"
    streams = []

    def run(*argv):
        import contextlib
        import io

        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            status = main([str(a) for a in argv])
        streams.append(err.getvalue())
        assert status == 0, err.getvalue()
        return json.loads(out.getvalue()) if "--json" in argv else out.getvalue()

    batch = run("batch", "add", corpus.RECIPES / "demo-nir-liquid.toml", "--db", url, "--json")["batch_id"]
    (folder / "amounts.csv").write_text(AMOUNTS)
    run("batch", "actual", batch, folder / "amounts.csv", "--db", url)
    run("batch", "measure", batch, corpus.RECIPES / "measurements" / "demo-nir-liquid-srdr.csv", "--kind", "srdr",
        "--no-fit", "--db", url)
    run("batch", "export", folder / "lab.zip", "--db", url)
    archive = (folder / "lab.zip").read_bytes()
    (folder / "lab.zip").unlink()
    (folder / "amounts.csv").unlink()
    return {"folder": folder, "url": url, "batch": batch, "archive": archive}


def _prepare(case: corpus.Case, work: Path) -> None:
    work.mkdir(parents=True)
    if case.copy_recipes:
        shutil.copytree(corpus.RECIPES, work / "recipes", ignore=shutil.ignore_patterns("*.py", "measurements"))
    for relative, content in case.files.items():
        path = work / relative
        path.parent.mkdir(parents=True, exist_ok=True)
        if content == "|fifo":
            os.mkfifo(path)
        elif isinstance(content, str) and content.startswith("->"):
            path.unlink(missing_ok=True)
            path.symlink_to(content[2:])
        elif isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")


def _run_case(case, work, lab, capsys, monkeypatch) -> list[str]:
    _prepare(case, work)
    new_db = work / "new.sqlite"
    fill = {WORK: str(work), DB: lab["url"], NEW_DB: f"sqlite:///{new_db}", BATCH: lab["batch"]}
    argv = []
    for arg in case.argv:
        for key, value in fill.items():
            arg = arg.replace(key, value)
        argv.append(arg)
    cwd = work.parent / "cwd"
    before_files = _snapshot(work, cwd)
    before_rows = _counts(lab["url"])
    capsys.readouterr()
    with monkeypatch.context() as patch:
        for name, value in case.env.items():
            patch.setenv(name, value)

        def hang(signum, frame):
            raise _Hang()

        previous = signal.signal(signal.SIGALRM, hang)
        signal.setitimer(signal.ITIMER_REAL, HANG_S)
        started = time.monotonic()
        try:
            status = main(argv)
        except _Hang:
            status = "hang"
        except SystemExit as exc:  # --help and --version only
            status = f"SystemExit {exc.code}"
        except BaseException as exc:  # noqa: BLE001 - a traceback is what the corpus looks for
            status = f"raised {type(exc).__name__}: {exc}"[:300]
        finally:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, previous)
        seconds = time.monotonic() - started
    out, err = capsys.readouterr()
    problems = []
    if status != 2:
        problems.append(f"status {status}")
    if out:
        problems.append(f"stdout {out[:120]!r}")
    lines = err.splitlines()
    if len(lines) != 1 or not err.startswith("phantomlab: error: "):
        problems.append(f"stderr not one error line: {err[:300]!r}")
    if "Traceback" in err:
        problems.append("traceback")
    if SECRET in out or SECRET in err or SECRET[:20] in err:
        problems.append("the planted marker was echoed")
    if seconds > HANG_S:
        problems.append(f"took {seconds:.1f} s")
    if new_db.exists():
        problems.append("a database file was created")
    if _snapshot(work, cwd) != before_files:
        problems.append("files written or changed")
    if _counts(lab["url"]) != before_rows:
        problems.append("rows added to the batch log")
    return problems


@pytest.mark.parametrize("family", FAMILIES)
def test_bad_input_corpus(family, lab, tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("PHANTOMLAB_DB", raising=False)
    monkeypatch.delenv("PHANTOMLAB_DATA_DIRS", raising=False)
    for name in list(os.environ):
        if name.startswith("PHANTOMLAB_MAX_"):
            monkeypatch.delenv(name)
    (tmp_path / "cwd").mkdir()
    monkeypatch.chdir(tmp_path / "cwd")  # a default database would appear here
    cases = [c for c in corpus.all_cases(lab["archive"]) if c.family == family]
    failures = []
    for index, case in enumerate(cases):
        problems = _run_case(case, tmp_path / f"case-{index:03d}", lab, capsys, monkeypatch)
        failures += [f"{case.id}: {p}" for p in problems]
    assert not failures, "\n".join(failures)


def test_the_corpus_is_large_and_covers_every_family(lab):
    counts = collections.Counter(case.family for case in corpus.all_cases(lab["archive"]))
    assert set(counts) == set(FAMILIES)
    assert sum(counts.values()) >= 300, counts
    assert all(n >= 10 for n in counts.values()), counts
    ids = [case.id for case in corpus.all_cases(lab["archive"])]
    assert len(ids) == len(set(ids))
