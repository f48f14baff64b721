"""Where a run's files go beside its store: one naming rule, so that two stores in one folder
never share a log, a report folder, a lock or a failure note.

Every file of run N of store ``results/lot7.sqlite`` starts with the store's own file name:
``results/lot7.sqlite.run-N/`` (the report, figures and tables), ``lot7.sqlite.run-N.log``
(the run's log), ``lot7.sqlite.run-N.lock`` (held by the live run) and
``lot7.sqlite.run-N.failed.txt`` (how the run ended when the store could not take it).
"""

from __future__ import annotations

from pathlib import Path

DEFAULT_STORE_PATH = Path("results") / "sweeprig.sqlite"
"""Where runs are stored unless ``--store`` says otherwise (relative to the current folder)."""


def run_file_name(store_path: str | Path, run_id: int, suffix: str = "") -> str:
    """``<store file name>.run-<id><suffix>``, e.g. ``sweeprig.sqlite.run-3.log``; for a lab
    database URL ``lab-<database name>.run-<id><suffix>`` (never the URL itself)."""
    if isinstance(store_path, str) and "://" in store_path:
        name = store_path.split("?", 1)[0].rstrip("/").rsplit("/", 1)[-1]
        safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in name) or "db"
        return f"lab-{safe}.run-{int(run_id)}{suffix}"
    return f"{Path(store_path).name}.run-{int(run_id)}{suffix}"


def run_folder(store_path: str | Path, run_id: int) -> Path:
    """The run's report folder, beside the store (in the current folder for a lab
    database)."""
    if isinstance(store_path, str) and "://" in store_path:
        return Path(run_file_name(store_path, run_id))
    store = Path(store_path)
    return store.parent / run_file_name(store, run_id)


def run_log_path(store_path: str | Path, run_id: int, log_dir: str | Path | None = None) -> Path:
    """The run's log file: in ``log_dir`` when given, else beside the store."""
    lab = isinstance(store_path, str) and "://" in store_path
    folder = (Path(log_dir) if log_dir is not None else Path(".") if lab
              else Path(store_path).parent)
    return folder / run_file_name(store_path, run_id, ".log")


def night_file_name(store_path: str | Path, number: int, suffix: str = "") -> str:
    """``<store file name>.night-<number><suffix>``: night K's journal (``.json``), its lock
    (``.lock``) and its summary folder (no suffix), beside the store."""
    return f"{Path(store_path).name}.night-{int(number)}{suffix}"


def night_path(store_path: str | Path, number: int, suffix: str = "") -> Path:
    """Night ``number``'s file with ``suffix`` (see :func:`night_file_name`), beside the store."""
    store = Path(store_path)
    return store.parent / night_file_name(store, number, suffix)
