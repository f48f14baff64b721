"""Start-up imports only what a command needs: the command line, ``--help`` and ``check`` load
neither pandas, matplotlib, scipy, pyarrow, the simulator nor the run store's SQLite and
PostgreSQL code; and a command whose module cannot be imported fails the whole command line
loudly instead of vanishing from it. An import-set check in a fresh interpreter, not a timing
(the start-up times are printed by ``pytest -m perf tests/perf/test_perf_startup.py``)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "sequences" / "demo" / "quick.toml"

#: Libraries no start-up path may load.
HEAVY = ("pandas", "matplotlib", "scipy", "pyarrow", "skrf")
#: The simulator proper. ``sweeprig.sim.names`` (the roles and shipped names the help lists)
#: is light; ``check`` on the built-in simulated bench takes the default description's figures
#: from the file kept beside :mod:`sweeprig.engine.sim_specs` (not even the description's
#: model is built), never the bench that builds and serves the instruments.
SIMULATOR = ("sweeprig.sim.mixer", "sweeprig.sim.world", "sweeprig.sim.server",
             "sweeprig.sim.instruments", "sweeprig.sim.scpi", "sweeprig.sim.truth",
             "sweeprig.sim.bench", "sweeprig.sim.faults", "sweeprig.sim.analyzer_display")

#: The run store's implementations: the command line names the default store path only.
STORES = ("sweeprig.store.sqlite", "sweeprig.store.postgres", "sweeprig.store.open")

#: The reduction of a stored run and the store's records: ``check`` reads the study roles and
#: the specs' figure names from :mod:`sweeprig.analysis.roles` alone.
REDUCTION = ("sweeprig.analysis.reduce", "sweeprig.store.base")

_PROBE = """
import json, sys
def loaded():
    return sorted(m for m in sys.modules if m.split('.')[0] in {heavy} or
                  any(m == s or m.startswith(s + '.') for s in {sim} + {stores} + {reduction}))
import sweeprig.cli.main as main
after_import = loaded()
sim_after_import = sorted(m for m in sys.modules if m.startswith('sweeprig.sim'))
import typer.main
group = typer.main.get_command(main.app)
ctx = group.make_context('sweeprig', ['check', {quick!r}], resilient_parsing=True)
command = group.get_command(ctx, 'check')
command.make_context('check', [{quick!r}], parent=ctx)
name = command.name
after_resolve = loaded()
try:
    main.app(['check', {quick!r}], prog_name='sweeprig', standalone_mode=False)
    code = 0
except SystemExit as exc:
    code = exc.code
after_check = loaded()
sim_after_check = sorted(m for m in sys.modules if m.startswith('sweeprig.sim'))
print(json.dumps(dict(name=name, code=code, after_import=after_import,
                      sim_after_import=sim_after_import, after_resolve=after_resolve,
                      after_check=after_check, sim_after_check=sim_after_check)))
"""


def _probe() -> dict:
    code = _PROBE.format(heavy=set(HEAVY), sim=SIMULATOR, stores=STORES, reduction=REDUCTION,
                        quick=str(QUICK))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_the_command_line_and_check_load_no_heavy_library_nor_the_simulator() -> None:
    seen = _probe()
    assert seen["name"] == "check"
    assert seen["code"] in (0, None)
    assert seen["after_import"] == []
    assert seen["after_resolve"] == []
    assert seen["after_check"] == []
    # --help lists the sim commands from the light names module only
    assert set(seen["sim_after_import"]) <= {"sweeprig.sim", "sweeprig.sim.names"}
    # check states the default simulated bench's figures from the kept file alone
    assert set(seen["sim_after_check"]) <= {"sweeprig.sim", "sweeprig.sim.names"}


def test_a_command_module_that_fails_to_import_fails_the_command_line() -> None:
    code = ("import sys; sys.modules['sweeprig.cli.report_cmd'] = None\n"
            "import sweeprig.cli.main")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, timeout=120, check=False)
    assert done.returncode != 0
    assert "report_cmd" in done.stderr
