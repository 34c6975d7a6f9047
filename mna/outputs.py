"""The output folder of ``mna run``: a run's files appear together or not at all.

A run writes its CSV, PNG and JSON files into a new staging folder beside
the output folder (``results/.valve.new-1234/``) and :meth:`OutputFolder.commit`
puts that folder in place of the old one with two renames, so the folder
never holds the new CSV beside the old summary, whatever interrupts the
run. The old folder is removed after the swap.

That swap is only done to a folder mna made: one that does not exist yet,
or holds nothing but the files a run writes (``summary.json``, ``*.csv``,
``*.png``, and a study's ``runs.parquet``). Any other folder (``--out .``, say) is updated file by file
with ``summary.json`` removed first and written last, so a folder without
a ``summary.json`` is unmistakably incomplete.

A run that stops on an input error replaces the folder's contents by a
``summary.json`` that says so (:func:`mark_failed`): the previous run's
results do not stay as if they were current.

Files and folders are created with the user's umask (``tempfile`` would
make them private to the user).
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
import threading
from pathlib import Path

#: Names of the files a run writes (the only ones a swap may discard).
_RUN_FILE = re.compile(r".+\.(csv|png|json|parquet)\Z")

_UMASK_LOCK = threading.Lock()


def umask() -> int:
    """The process's file-creation mask.

    Read from ``/proc/self/status`` where there is one (Linux), so it is never
    changed; elsewhere set and restored at once (``os.umask`` only writes it).
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    with _UMASK_LOCK:
        mask = os.umask(0o022)
        os.umask(mask)
    return mask


def folder_name(stem: str) -> str:
    """A safe folder name for results of the input ``stem``: never ``..``, ``.``, hidden or empty.

    ``...mna`` has the stem ``..``: its results went to the folder above
    ``results/``; they go to ``results/circuit/`` instead.
    """
    name = re.sub(r"[\x00-\x1f\x7f/\\]", "_", stem).lstrip(".").strip()
    return name or "circuit"


def _owned(folder: Path) -> bool:
    """Whether ``folder`` holds only what a run writes (so it may be swapped whole)."""
    try:
        entries = list(os.scandir(folder))
    except FileNotFoundError:
        return True
    except NotADirectoryError:
        return False
    return all(e.is_file(follow_symlinks=False) and _RUN_FILE.match(e.name) for e in entries)


class OutputFolder:
    """Stage a run's files, then put them in place at once.

    ``stage`` is where writers write; :meth:`final_path` turns a staged path
    into the path it will have. Use as a context manager: leaving the block
    with an exception discards the staging folder and leaves the output
    folder as it was; :meth:`commit` puts the staged files in place.
    """

    def __init__(self, folder: str | Path):
        self.folder = Path(folder)
        self.swap = _owned(self.folder)
        parent = self.folder.parent
        parent.mkdir(parents=True, exist_ok=True)
        self.stage = Path(tempfile.mkdtemp(prefix=f".{self.folder.name}.new-", dir=parent))
        os.chmod(self.stage, 0o777 & ~umask())

    def __enter__(self) -> "OutputFolder":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        if self.stage.exists():
            shutil.rmtree(self.stage, ignore_errors=True)

    def final_path(self, staged: str | Path) -> Path:
        return self.folder / Path(staged).relative_to(self.stage)

    def commit(self) -> None:
        """Put the staged files in place of the folder's previous contents."""
        if self.swap:
            old = None
            if self.folder.exists():
                old = Path(tempfile.mkdtemp(prefix=f".{self.folder.name}.old-", dir=self.folder.parent))
                os.rmdir(old)
                os.rename(self.folder, old)
            os.rename(self.stage, self.folder)
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)
            return
        self._commit_file_by_file()

    def _commit_file_by_file(self) -> None:
        summary = self.folder / "summary.json"
        summary.unlink(missing_ok=True)  # first: the folder is visibly incomplete until the end
        staged = sorted(self.stage.iterdir(), key=lambda p: p.name == "summary.json")
        for path in staged:
            os.replace(path, self.folder / path.name)
        shutil.rmtree(self.stage, ignore_errors=True)


def mark_failed(folder: str | Path, summary_text: str) -> None:
    """After an input error: the folder (if it exists) holds only ``summary.json`` saying so.

    A folder mna does not own keeps its other files; its run outputs lose
    their summary, which now names the error.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return
    with OutputFolder(folder) as out:
        (out.stage / "summary.json").write_text(summary_text, encoding="utf-8")
        os.chmod(out.stage / "summary.json", 0o666 & ~umask())
        out.commit()
