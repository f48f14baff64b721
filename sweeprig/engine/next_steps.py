"""What to do after a run that did not complete: the commands to type next, in order.

One rule, used by ``run``/``resume`` when a run ends, by the run store's record of that end,
and by ``status`` for a run whose process died without a word (shown ``interrupted``):

* ``unsafe`` (the safe state was not proven) and ``interrupted`` (the process is gone: it
  may have left outputs on) on a real bench: ``sweeprig safe --bench BENCH`` first;
* then, for ``aborted``, ``interrupted``, ``unsafe`` and ``planned``:
  ``sweeprig resume RUN_ID --store STORE`` (with ``--sim-bench`` where the run used one);
* ``complete`` and ``running`` runs need nothing.

On the simulated bench nothing outlives the process, so there is no ``safe`` step. Paths are
quoted for a POSIX shell (:func:`shlex.quote`).
"""

from __future__ import annotations

import shlex
from pathlib import Path

from sweeprig.store.postgres import is_database_url, public_url

#: Statuses after which the run can be continued with ``resume``.
RESUMABLE: frozenset[str] = frozenset({"aborted", "interrupted", "unsafe", "planned"})
#: Statuses after which a real bench may still be live.
MAYBE_LIVE: frozenset[str] = frozenset({"unsafe", "interrupted"})


def next_steps(
    status: str,
    run_id: int,
    store_path: str | Path,
    *,
    bench_path: str | Path | None,
    simulated: bool,
    sim_description: str | Path | None = None,
) -> tuple[str, ...]:
    """The commands to run next after a run ended with ``status`` (empty when none)."""
    steps: list[str] = []
    if status in MAYBE_LIVE and not simulated and bench_path is not None:
        steps.append(f"sweeprig safe --bench {shlex.quote(str(bench_path))}")
    if status in RESUMABLE:
        if isinstance(store_path, str) and is_database_url(store_path):  # never its password
            resume = f"sweeprig resume {run_id} --db {shlex.quote(public_url(store_path))}"
        else:
            resume = f"sweeprig resume {run_id} --store {shlex.quote(str(store_path))}"
        if simulated and sim_description is not None:
            resume += f" --sim-bench {shlex.quote(str(sim_description))}"
        steps.append(resume)
    return tuple(steps)
