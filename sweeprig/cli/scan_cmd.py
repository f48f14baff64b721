"""``sweeprig scan``: find instruments, ask who they are, and suggest a driver profile."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from sweeprig.cli import term
from sweeprig.cli.common import fail, print_error
from sweeprig.errors import InstrumentError, SweeprigError
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.instruments.profile import Profile


@dataclass(frozen=True)
class ScanResult:
    """One resource as scanned: its ``*IDN?`` reply (or the error) and suggested profiles."""

    resource: str
    idn: str | None
    error: str | None
    profiles: tuple[str, ...]


def identify_resource(
    resource: str,
    profiles: list[Profile],
    *,
    visa_library: str,
    timeout_s: float,
    resource_manager: object | None = None,
) -> ScanResult:
    """Open ``resource``, ask ``*IDN?`` (the only command sent) and match the profiles."""
    from sweeprig.instruments.profile import matching_profiles
    from sweeprig.transport import visa

    try:
        transport = visa.VisaTransport(
            resource,
            visa_library=visa_library,
            timeout_s=timeout_s,
            resource_manager=resource_manager,  # type: ignore[arg-type]
        )
        try:
            idn = transport.query("*IDN?").strip()
        finally:
            transport.close()
    except SweeprigError as exc:
        return ScanResult(resource, None, exc.what, ())
    names = tuple(p.name for p in matching_profiles(idn, profiles))
    return ScanResult(resource, idn, None, names)


def scan_command(
    resource: Annotated[
        list[str] | None,
        typer.Option(
            "--resource",
            "-r",
            help="A VISA resource to identify as well (repeatable). Needed for raw TCP "
            "sockets such as TCPIP0::127.0.0.1::5025::SOCKET, which discovery cannot find.",
        ),
    ] = None,
    visa_library: Annotated[
        str | None, typer.Option("--visa-library", help="pyvisa backend: @py (pyvisa-py), "
                                 "@ivi, or the path of a VISA library (default: "
                                 "$SWEEPRIG_VISA_LIBRARY, else @py).")
    ] = None,
    identify: Annotated[
        bool,
        typer.Option("--identify/--no-identify", help="Ask each resource *IDN? (the only "
                     "command sent)."),
    ] = True,
    discover: Annotated[
        bool,
        typer.Option("--discover/--no-discover", help="List the resources the VISA library "
                     "can discover (USB, GPIB, VXI-11 on the local network)."),
    ] = True,
    timeout_s: Annotated[
        float, typer.Option("--timeout", min=0.05, help="Seconds to wait for each reply.")
    ] = 2.0,
    profiles_dir: Annotated[
        list[Path] | None,
        typer.Option("--profiles", help="Extra folder of driver profiles (repeatable)."),
    ] = None,
) -> None:
    """List VISA instruments, their *IDN? and the driver profiles that match.

    The VISA library's discovery does not find raw TCP sockets (pyvisa-py cannot list them):
    give those with --resource.

    Example: sweeprig scan --no-discover -r TCPIP0::127.0.0.1::5025::SOCKET
    """
    from sweeprig.instruments.profile import load_all_profiles
    from sweeprig.transport import visa
    from sweeprig.transport.backend import choose_visa_library

    console = term.Console(highlight=False)
    visa_library = visa_library or choose_visa_library()
    found: list[str] = []
    discovery: SweeprigError | None = None
    if discover:
        try:
            found = visa.list_resources(visa_library)
        except SweeprigError as exc:
            discovery = exc
            print_error(exc, prefix="warning: ")
    extra = [r for r in (resource or []) if r not in found]
    resources = found + extra
    if not resources:
        console.print("no VISA resources found; name raw TCP sockets with --resource")
        if discovery is not None:  # nothing was looked at: the scan failed
            raise typer.Exit(discovery.exit_code)
        return
    profiles = load_all_profiles(profiles_dir or []) if identify else []
    table = term.Table(title="VISA resources", title_justify="left")
    table.add_column("resource")
    if identify:
        table.add_column("*IDN?")
        table.add_column("profiles")
    failed: list[str] = []
    rm = None
    if identify:
        try:
            rm = visa.open_resource_manager(visa_library)
        except SweeprigError as exc:
            raise fail(exc) from None
    try:
        for name in resources:
            if not identify:
                table.add_row(term.Text(one_line(name)))
                continue
            result = identify_resource(
                name, profiles, visa_library=visa_library, timeout_s=timeout_s,
                resource_manager=rm,
            )
            if result.error is not None:
                failed.append(name)
                table.add_row(term.Text(one_line(name)),
                              term.Text(one_line(result.error), style="red"), "")
            else:  # an instrument's reply may hold anything: shown escaped, never as markup
                table.add_row(term.Text(one_line(name)), term.Text(one_line(result.idn or "")),
                              ", ".join(result.profiles) or "(none)")
    finally:
        if rm is not None:
            rm.close()
    console.print(table)
    if failed:  # a resource that does not answer is a failed scan (scripts test the exit)
        raise fail(InstrumentError(
            f"{len(failed)} of {len(resources)} resource(s) could not be identified: "
            + ", ".join(one_line(name) for name in failed[:3])
            + (" and more" if len(failed) > 3 else ""),
            fix="check the instrument is on and reachable (address, port, cable), or "
            "raise --timeout; the table above says what each one did"))


def register(app: typer.Typer) -> None:
    """Add ``scan`` to the root app."""
    app.command("scan")(scan_command)


def __getattr__(name: str) -> Any:
    """``visa`` (:mod:`sweeprig.transport.visa`) is loaded on first use, not at start-up."""
    if name == "visa":
        from sweeprig.transport import visa

        return visa
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
