"""How a run ended, for machines: a small summary file, and a command the user chose.

When a run ends (complete, aborted, unsafe) ``run`` and ``resume`` write ``summary.json`` into
the run's folder beside the store (``<store>.run-<id>/summary.json``, see
:mod:`sweeprig.store.paths`) and, when the user gave one, run a notification command, so a
lab's own mail or chat script can tell someone.

The command comes from the command line (``--notify``) or the environment
(``SWEEPRIG_NOTIFY``), never from a sequence or bench file (a file does not get to run
programs). It is split like a POSIX shell would split it (:func:`shlex.split`) and run
without a shell, with the run's facts in its environment:

``SWEEPRIG_RUN_ID``, ``SWEEPRIG_RUN_STATUS`` (complete, aborted, unsafe),
``SWEEPRIG_VERDICT`` (pass, fail, inconclusive, or empty when no figures were made),
``SWEEPRIG_REPORT`` (the HTML report, or empty), ``SWEEPRIG_SUMMARY`` (summary.json),
``SWEEPRIG_STORE`` (the run store), ``SWEEPRIG_NEXT`` (the next command to run, or empty).

The command gets :data:`NOTIFY_TIMEOUT_S` to finish; whatever it does, the run's own exit
code does not change, and a failure is reported (and recorded as an event) but is not an
error of the run.
"""

from __future__ import annotations

import json
import os
import shlex
import subprocess
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from sweeprig.errors import InputError

if TYPE_CHECKING:  # the store is loaded when a run ends, not when a command starts
    from sweeprig.store.open import StoreTarget

NOTIFY_ENV = "SWEEPRIG_NOTIFY"
NOTIFY_TIMEOUT_S = 60.0
SUMMARY_FILE = "summary.json"
SUMMARY_FORMAT = 1


@dataclass(frozen=True)
class RunEnd:
    """The facts of a run's end that the summary and the command carry."""

    run_id: int
    status: str
    reason: str | None
    points_done: int
    points_total: int
    store_path: StoreTarget
    verdict: str | None
    report_html: Path | None
    figures_json: Path | None
    next_steps: tuple[str, ...]
    limit_counts: Mapping[str, int] | None = None


def notify_command(option: str | None) -> tuple[str, ...] | None:
    """The notification command as arguments: ``--notify`` wins over ``SWEEPRIG_NOTIFY``;
    None when neither is set. A command that cannot be split is an :class:`InputError`."""
    text = option if option is not None else os.environ.get(NOTIFY_ENV)
    if text is None or not text.strip():
        return None
    where = "--notify" if option is not None else f"${NOTIFY_ENV}"
    try:
        args = tuple(shlex.split(text))
    except ValueError as exc:
        raise InputError(f"the notification command cannot be split into words ({exc})",
                         where=where, fix="close the quote, e.g. --notify 'mail-me \"run done\"'"
                         ) from None
    return args


def write_summary(end: RunEnd, folder: Path) -> Path:
    """Write ``summary.json`` into ``folder`` (created if missing); return its path."""
    folder.mkdir(parents=True, exist_ok=True)
    document = {
        "format": SUMMARY_FORMAT,
        "written_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "run": end.run_id,
        "status": end.status,
        "reason": end.reason,
        "points": {"done": end.points_done, "total": end.points_total},
        "verdict": end.verdict,
        "limit_checks": dict(end.limit_counts) if end.limit_counts is not None else None,
        "store": _store_label(end.store_path),  # a lab database: its URL without password
        "report": None if end.report_html is None else str(end.report_html),
        "figures": None if end.figures_json is None else str(end.figures_json),
        "next": list(end.next_steps),
    }
    path = folder / SUMMARY_FILE
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(document, indent=2) + "\n", encoding="utf-8")
    tmp.replace(path)  # a reader never sees half a file
    return path


def notification_env(end: RunEnd, summary: Path | None) -> dict[str, str]:
    """The run's facts as environment variables for the command (see the module docstring)."""
    return {
        "SWEEPRIG_RUN_ID": str(end.run_id),
        "SWEEPRIG_RUN_STATUS": end.status,
        "SWEEPRIG_VERDICT": end.verdict or "",
        "SWEEPRIG_REPORT": "" if end.report_html is None else str(end.report_html),
        "SWEEPRIG_SUMMARY": "" if summary is None else str(summary),
        "SWEEPRIG_STORE": _store_label(end.store_path),
        "SWEEPRIG_NEXT": end.next_steps[0] if end.next_steps else "",
    }


@dataclass(frozen=True)
class NotifyResult:
    ok: bool
    message: str


def run_notification(args: Sequence[str], env: Mapping[str, str],
                     timeout_s: float = NOTIFY_TIMEOUT_S) -> NotifyResult:
    """Run the command with ``env`` added to this process's environment; never raises."""
    try:
        done = subprocess.run(list(args), env={**os.environ, **env}, timeout=timeout_s,
                              stdin=subprocess.DEVNULL, capture_output=True, text=True,
                              check=False)
    except FileNotFoundError:
        return NotifyResult(False, f"notification command not found: {args[0]}")
    except PermissionError:
        return NotifyResult(False, f"notification command cannot be run: {args[0]}")
    except subprocess.TimeoutExpired:
        return NotifyResult(False, f"notification command did not finish within "
                                   f"{timeout_s:g} s: {args[0]}")
    except OSError as exc:
        return NotifyResult(False, f"notification command failed to start: {exc}")
    if done.returncode != 0:
        tail = (done.stderr or done.stdout or "").strip().splitlines()[-1:] or [""]
        return NotifyResult(False, f"notification command exited {done.returncode}: "
                                   f"{args[0]} {tail[0]}".rstrip())
    return NotifyResult(True, f"notification sent ({args[0]})")


def _store_label(target: StoreTarget) -> str:
    """:func:`sweeprig.store.open.store_label`, imported when first needed."""
    from sweeprig.store.open import store_label

    return store_label(target)
