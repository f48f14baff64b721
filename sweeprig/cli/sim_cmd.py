"""``sweeprig sim ...``: the simulated bench on the command line.

A thin layer over :func:`sweeprig.sim.bench.start_sim_bench`; the lead registers ``app`` as
the ``sim`` command group.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from sweeprig.cli import term
from sweeprig.cli.common import error_console, fail
from sweeprig.clock import Clock, VirtualClock, WallClock
from sweeprig.errors import InputError, SweeprigError
from sweeprig.signals import RunStopped, active, stop_signals
from sweeprig.sim.names import (
    DEFAULT_MAX_CONNECTIONS,
    MAX_CONNECTIONS_LIMIT,
    ROLES,
    shipped_benches,
)

if TYPE_CHECKING:
    from sweeprig.sim.bench import SimBench

app = typer.Typer(
    name="sim",
    help="The simulated bench: a behavioural mixer model behind real SCPI sockets.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

SERVE_EXAMPLE = """\
Examples:

  sweeprig sim serve

  sweeprig sim serve my-bench.toml --port-base 5025

Then talk to the instruments from pyvisa (pyvisa-py, newline terminations):

  rm = pyvisa.ResourceManager("@py")

  sa = rm.open_resource("TCPIP0::127.0.0.1::5028::SOCKET")

  sa.read_termination = sa.write_termination = "\\n"

  print(sa.query("*IDN?"))
"""


@app.callback()
def _sim() -> None:
    """The simulated bench: a behavioural mixer model behind real SCPI sockets."""


def _out() -> term.Console:
    return term.Console(soft_wrap=True, highlight=False)


_err = error_console
_fail = fail


def _ports(port_base: int) -> dict[str, int] | None:
    """Role → port from a base port (roles in their fixed order); None for ephemeral ports."""
    if port_base == 0:
        return None
    last = port_base + len(ROLES) - 1
    if port_base < 1 or last > 65535:
        raise InputError(
            f"--port-base {port_base} leaves no room for {len(ROLES)} ports (up to {last})",
            where="sweeprig sim serve --port-base",
            fix="use 0 for ports chosen by the system, or a base such as 5025",
        )
    return {role: port_base + k for k, role in enumerate(ROLES)}


@app.command("serve", epilog=SERVE_EXAMPLE)
def serve_command(
    description: Annotated[str | None, typer.Argument(
        help="sim-bench description: a .toml file or a shipped name "
        f"({', '.join(shipped_benches()) or 'default'}); default: the shipped 'default'",
        show_default=False)] = None,
    host: Annotated[str, typer.Option(
        "--host", help="address to listen on; anything but loopback exposes the simulated "
        "instruments, which have no authentication, to the network")] = "127.0.0.1",
    port_base: Annotated[int, typer.Option(
        "--port-base", help="first TCP port; the roles take consecutive ports in the order "
        f"{', '.join(ROLES)}; 0 lets the system choose free ports")] = 0,
    realtime: Annotated[bool, typer.Option(
        "--realtime", help="let simulated time pass at wall-clock speed (sweeps, settling "
        "and chamber ramps take as long as on real hardware)")] = False,
    write_bench: Annotated[Path | None, typer.Option(
        "--write-bench", help="also write a bench file with these resources, for "
        "'sweeprig run SEQUENCE --bench FILE' from another terminal",
        show_default=False)] = None,
    max_connections: Annotated[int, typer.Option(
        "--max-connections", min=1, max=MAX_CONNECTIONS_LIMIT,
        help="clients each instrument serves at once; one more is refused with a "
        "'-310' error line")] = DEFAULT_MAX_CONNECTIONS,
) -> None:
    """Serve the simulated instruments on raw SCPI sockets until Ctrl-C (or SIGTERM, SIGHUP).

    Prints each role's VISA resource string and *IDN? reply; several clients may connect
    (up to --max-connections to each instrument).

    Examples:

      sweeprig sim serve --port-base 5025

      sweeprig sim serve --write-bench served.toml   (then, in another terminal:
      sweeprig run sequences/demo/quick.toml --bench served.toml)
    """
    from sweeprig.sim.server import is_loopback

    remote = not is_loopback(host)
    if remote:
        _err().print(term.Text(
            f"warning: listening on {host}: the simulated instruments are reachable from the "
            "network, without any authentication. Use --host 127.0.0.1 unless you mean it.",
            style="bold yellow",
        ))
    clock: Clock = WallClock() if realtime else VirtualClock()
    try:
        bench = start_sim_bench(description, clock=clock, host=host, ports=_ports(port_base),
                                allow_remote=remote, max_connections=max_connections)
    except SweeprigError as exc:
        raise _fail(exc) from None
    try:
        with stop_signals():  # in place before "ready": a client may stop it at once
            _print_resources(bench, realtime)
            if write_bench is not None:
                _write_bench_file(bench, write_bench)
            _log_server_warnings()
            _out().print("ready; press Ctrl-C to stop")
            sys.stdout.flush()
            stopped_by = _wait_for_interrupt()
    except RunStopped as stop:  # a stop while the table or "ready" was being printed
        stopped_by = stop.signame
    except SweeprigError as exc:
        raise _fail(exc) from None
    finally:
        bench.close()
    _out().print("simulated bench stopped" + (f" ({stopped_by})" if stopped_by else ""))


def start_sim_bench(description: Any, **kwargs: Any) -> SimBench:
    """:func:`sweeprig.sim.bench.start_sim_bench`, the simulator loaded when it is served."""
    from sweeprig.sim.bench import start_sim_bench as start

    return start(description, **kwargs)


def _print_resources(bench: SimBench, realtime: bool) -> None:
    out = _out()
    desc = bench.description
    mode = "wall-clock time" if realtime else "virtual time"
    out.print(f"simulated bench: part {desc.part}, seed {desc.seed}, {mode}")
    width = max(len(r) for r in bench.resources.values())
    out.print(f"{'role':<8} {'resource':<{width}}  *IDN?")
    for role in ROLES:
        identity = bench.instruments[role].handle("*IDN?")
        out.print(f"{role:<8} {bench.resources[role]:<{width}}  {identity}")


def _write_bench_file(bench: SimBench, path: Path) -> None:
    from sweeprig.engine.session import served_bench_text

    try:
        path.write_text(served_bench_text(bench.resources, bench.description), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write {path}: {exc.strerror or exc}",
                         where="sweeprig sim serve --write-bench",
                         fix="give a path in a folder you can write to") from None
    _out().print(f"bench file written: {path}")


def _log_server_warnings() -> None:
    """Show the server's warnings (descriptors exhausted, connections refused) on stderr."""
    import logging

    logger = logging.getLogger("sweeprig.sim.server")
    if not logger.handlers:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(asctime)s warning: %(message)s"))
        handler.setLevel(logging.WARNING)
        logger.addHandler(handler)


def _wait_for_interrupt() -> str | None:
    """Block until SIGINT (Ctrl-C), SIGTERM or SIGHUP; returns the first signal's name.

    From here on every signal is only recorded, so that closing the servers is never cut
    short, however many arrive.
    """
    stops = active()
    if stops is None:  # not the main thread: no signal can reach this wait
        raise InputError("the simulated bench can only be served from the main thread",
                         where="sweeprig sim serve",
                         fix="call serve_command from the main thread")
    stops.begin_stop_path()
    while stops.requested is None:
        time.sleep(0.05)
    return stops.requested
