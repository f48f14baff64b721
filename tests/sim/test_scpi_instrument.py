"""The SCPI base class as a client sees it: pyvisa (pyvisa-py) over a loopback socket."""

from __future__ import annotations

import struct
import threading
from collections.abc import Iterator

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.sim.instruments import SignalSource
from sweeprig.sim.scpi import (
    OPER_SWEEPING,
    Command,
    Identity,
    ScpiError,
    ScpiInstrument,
    Setting,
    format_number,
)
from sweeprig.sim.server import ServedBench, serve

SWEEP_S = 0.75
TRACE = [-10.5, -20.25, -30.125, -40.0, -97.5]


class Gadget(ScpiInstrument):
    """Test-only instrument: indexed markers, an enum, a timed sweep, a binary trace."""

    def __init__(self, clock: VirtualClock) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-TEST", "T-1", "0.1"))
        self.add_setting(Setting("marker_x_hz", "CALCulate:MARKer[1-4]:X", "float", 1e9,
                                 unit="frequency", minimum=0.0, maximum=13.6e9))
        self.add_setting(Setting("points", "[SENSe]:SWEep:POINts", "int", 1001,
                                 minimum=101, maximum=10001))
        self.add_setting(Setting("format", "FORMat[:DATA]", "enum", "ASCii",
                                 choices=("ASCii", "REAL,32")))
        self.add_setting(Setting("atten_db", "INPut:ATTenuation", "float", 10.0,
                                 unit="level_db", minimum=0.0, maximum=70.0,
                                 coerce=lambda v: 2.0 * round(v / 2.0)))
        self.add_command("INITiate[:IMMediate]", write=self._init)
        self.add_command("TRACe[:DATA]", query=self._trace)
        self.add_command("FAIL", write=self._fail)

    def _init(self, cmd: Command) -> None:
        cmd.no_params()
        self.start_operation(SWEEP_S, operation_bit=OPER_SWEEPING)

    def _trace(self, cmd: Command) -> str | bytes:
        if cmd.one().text.upper() != "TRACE1":
            raise ScpiError(-224, f"{cmd.header}? {cmd.params[0].text}")
        if self.value("format") == "ASCII":
            return ",".join(format_number(v) for v in TRACE)
        payload = struct.pack(f">{len(TRACE)}f", *TRACE)
        length = str(len(payload))
        return f"#{len(length)}{length}".encode("ascii") + payload

    def _fail(self, cmd: Command) -> None:
        raise RuntimeError("a simulator bug")


@pytest.fixture
def clock() -> VirtualClock:
    return VirtualClock()


@pytest.fixture
def bench(clock: VirtualClock) -> Iterator[ServedBench]:
    with serve({"rf": SignalSource(clock), "gadget": Gadget(clock)}) as served:
        yield served


@pytest.fixture
def rm() -> Iterator[pyvisa.ResourceManager]:
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


def _open(rm: pyvisa.ResourceManager, bench: ServedBench, role: str,
          timeout_ms: int = 2000) -> pyvisa.resources.MessageBasedResource:
    return rm.open_resource(bench.resources[role], read_termination="\n",
                            write_termination="\n", timeout=timeout_ms)


@pytest.fixture
def rf(rm: pyvisa.ResourceManager, bench: ServedBench) -> pyvisa.resources.MessageBasedResource:
    return _open(rm, bench, "rf")


@pytest.fixture
def gadget(rm: pyvisa.ResourceManager,
           bench: ServedBench) -> pyvisa.resources.MessageBasedResource:
    return _open(rm, bench, "gadget")


def _errors(inst: pyvisa.resources.MessageBasedResource) -> list[str]:
    found = []
    while True:
        entry = inst.query("SYST:ERR?")
        if entry.startswith("0,"):
            return found
        found.append(entry)


# ---------------------------------------------------------------- headers
@pytest.mark.parametrize(
    "command",
    ["FREQ 2.5e9", "FREQuency 2.5e9", "freq 2.5e9", "SOUR:FREQ 2.5e9", ":SOURCE:FREQ:CW 2.5E9",
     "sour:freq:fix 2500000000", "Source:Frequency:Fixed 2.5GHz", "FREQ 2500 MHZ"],
)
def test_short_long_case_and_optional_forms(rf, command: str) -> None:
    rf.write(command)
    assert float(rf.query("FREQ?")) == 2.5e9
    assert float(rf.query(":sour:freq:cw?")) == 2.5e9
    assert _errors(rf) == []


def test_relative_paths_after_semicolon(rf) -> None:
    rf.write("SOUR:POW -12.5;:FREQ 3e9;:OUTP:STAT ON")
    assert rf.query("SOUR:POW?;FREQ?") == "-12.5;3000000000"
    assert rf.query(":OUTP?;:SOUR:FREQ?;POW?") == "1;3000000000;-12.5"
    # SCPI-99: after SOUR:FREQ:CW the branch is SOUR:FREQ, so POW is undefined there
    rf.write("SOUR:FREQ:CW 1e9;POW -20")
    assert rf.query("POW?") == "-12.5"
    assert _errors(rf) == ['-113,"Undefined header;SOUR:FREQ:POW"']


def test_unit_suffixes_on_the_wire(rf) -> None:
    rf.write("FREQ 750 kHz;POW -7 dBm")
    assert rf.query("FREQ?;POW?") == "750000;-7"
    rf.write("FREQ 1 V")
    assert rf.query("FREQ?") == "750000"
    assert _errors(rf) == ['-131,"Invalid suffix;SOUR:FREQ 1 V"'.replace("SOUR:", "")]


def test_min_max_def(rf) -> None:
    assert float(rf.query("FREQ? MIN")) == 9e3
    assert float(rf.query("FREQ? MAX")) == 6e9
    rf.write("FREQ MAX;POW MIN")
    assert rf.query("FREQ?;POW?") == "6000000000;-130"
    rf.write("FREQ DEF;POW DEF")
    assert rf.query("FREQ?;POW?") == "1000000000;-30"
    assert _errors(rf) == []


def test_repr_exact_numbers(rf) -> None:
    rf.write("FREQ 1234567890.123")
    assert float(rf.query("FREQ?")) == 1234567890.123


# ---------------------------------------------------------------- errors
def test_undefined_header(rf) -> None:
    rf.write("FREQ:BOGUS 1")
    rf.write("*XYZ")
    assert _errors(rf) == ['-113,"Undefined header;FREQ:BOGUS"', '-113,"Undefined header;*XYZ"']


def test_out_of_range_keeps_the_setting(rf) -> None:
    rf.write("FREQ 2e9")
    rf.write("FREQ 7e9")
    assert float(rf.query("FREQ?")) == 2e9
    rf.write("POW 25")
    assert float(rf.query("POW?")) == -30.0
    errors = _errors(rf)
    assert errors[0] == '-222,"Data out of range;FREQ 7e9 above 6000000000"'
    assert errors[1].startswith('-222,"Data out of range;POW 25 above 20; caution')


def test_missing_and_extra_parameters(rf) -> None:
    rf.write("FREQ")
    rf.write("FREQ 1e9,2e9")
    rf.write("*RST 1")
    assert [e.split(",")[0] for e in _errors(rf)] == ["-109", "-108", "-108"]


def test_error_queue_order_and_overflow(rf) -> None:
    for i in range(20):
        rf.write(f"BAD{chr(65 + i)}")
    assert rf.query("SYST:ERR:COUN?") == "16"
    errors = _errors(rf)
    assert errors[:15] == [f'-113,"Undefined header;BAD{chr(65 + i)}"' for i in range(15)]
    assert errors[15] == '-350,"Queue overflow"'
    assert len(errors) == 16


def test_esr_bits_per_error_class(rf) -> None:
    rf.query("*ESR?")
    rf.write("BOGUS")
    assert int(rf.query("*ESR?")) == 32
    rf.write("FREQ 1e12")
    assert int(rf.query("*ESR?")) == 16


def test_query_error_sends_no_reply(rm, bench) -> None:
    rf = _open(rm, bench, "rf", timeout_ms=200)
    with pytest.raises(pyvisa.errors.VisaIOError):
        rf.query("FREQ:NOPE?")
    rf.timeout = 2000
    assert rf.query("*IDN?").startswith("Tarnwick Labs,TW-SG6,")


def test_simulator_bug_becomes_an_execution_error(gadget) -> None:
    gadget.write("FAIL")
    assert _errors(gadget) == ['-200,"Execution error;internal: RuntimeError: a simulator bug"']


# ---------------------------------------------------------------- status and common commands
def test_power_on_bit_then_cleared(rf) -> None:
    assert rf.query("*ESR?") == "128"
    assert rf.query("*ESR?") == "0"


def test_cls_clears_pon_and_queue(rf) -> None:
    rf.write("BOGUS")
    assert int(rf.query("*STB?")) & 4
    rf.write("*CLS")
    assert rf.query("*ESR?") == "0"
    assert rf.query("SYST:ERR?") == '0,"No error"'
    assert rf.query("*STB?") == "0"


def test_common_queries(rf) -> None:
    assert rf.query("*IDN?") == "Tarnwick Labs,TW-SG6,SG6-10001,1.0"
    assert rf.query("*TST?") == "0"
    assert rf.query("SYST:VERS?") == "1999.0"
    rf.write("*ESE 36;*SRE 32")
    assert rf.query("*ESE?;*SRE?") == "36;32"
    rf.write("BOGUS")  # command error: ESR bit 5 enabled → STB bits 2, 5, 6
    assert int(rf.query("*STB?")) == 4 + 32 + 64
    rf.write("STAT:QUES:ENAB 8;:STAT:OPER:ENAB 16;:STAT:PRES")
    assert rf.query("STAT:QUES:ENAB?;:STAT:OPER:ENAB?") == "0;0"


def test_opc_query_advances_the_clock_to_the_end_of_the_sweep(gadget, clock) -> None:
    start = clock.now()
    gadget.write("INIT")
    assert int(gadget.query("STAT:OPER:COND?")) == OPER_SWEEPING
    assert gadget.query("*OPC?") == "1"
    assert clock.now() == pytest.approx(start + SWEEP_S)
    assert gadget.query("STAT:OPER:COND?") == "0"
    assert int(gadget.query("STAT:OPER?")) == OPER_SWEEPING
    assert gadget.query("*OPC?") == "1"  # nothing pending: no time passes
    assert clock.now() == pytest.approx(start + SWEEP_S)


def test_opc_sets_esr_bit_when_done_and_wai_waits(gadget, clock) -> None:
    gadget.query("*ESR?")
    gadget.write("INIT;*OPC")
    assert gadget.query("*ESR?") == "0"
    assert gadget.query("*WAI;*ESR?") == "1"
    assert clock.now() == pytest.approx(SWEEP_S)


def test_rst_restores_defaults_with_rf_off_and_keeps_errors(rf) -> None:
    rf.write("FREQ 3e9;POW 5;:OUTP ON")
    rf.write("BOGUS")
    rf.write("*RST")
    assert rf.query("FREQ?;POW?;:OUTP?") == "1000000000;-30;0"
    assert rf.query("SYST:ERR:COUN?") == "1"


def test_indexed_enum_coerced_and_int_settings(gadget) -> None:
    gadget.write("CALC:MARK2:X 2.5 GHz;:CALCULATE:MARKER4:X 3e9")
    assert gadget.query("CALC:MARK2:X?;:CALC:MARK:X?;:CALC:MARK4:X?") == (
        "2500000000;1000000000;3000000000"
    )
    gadget.write("CALC:MARK5:X 1")
    gadget.write("FORM REAL,32")
    assert gadget.query("FORM?") == "REAL,32"
    gadget.write("FORMAT:DATA ascii")
    assert gadget.query("FORM?") == "ASC"
    gadget.write("FORM BINARY")
    gadget.write("INP:ATT 13.2 DB")
    assert gadget.query("INP:ATT?") == "14"
    gadget.write("SWE:POIN 500.4")
    assert gadget.query("SWE:POIN?") == "500"
    assert [e.split(",")[0] for e in _errors(gadget)] == ["-113", "-224"]


def test_binary_block_readback(gadget) -> None:
    assert [float(v) for v in gadget.query("TRAC? TRACE1").split(",")] == TRACE
    gadget.write("FORM REAL,32")
    values = gadget.query_binary_values("TRAC? TRACE1", datatype="f", is_big_endian=True)
    assert values == TRACE  # all exactly representable in 32 bits
    assert gadget.query("*OPC?") == "1"  # the stream is still in step


# ---------------------------------------------------------------- several clients
def test_several_clients_on_one_instrument(rm, bench) -> None:
    clients = [_open(rm, bench, "gadget") for _ in range(4)]
    failures: list[str] = []

    def work(k: int) -> None:
        inst = clients[k]
        for i in range(25):
            freq = 1e6 * (100 * k + i + 1)
            reply = inst.query(f"CALC:MARK{k + 1}:X {freq};X?")
            if float(reply) != freq:
                failures.append(f"client {k}: {reply} != {freq}")

    threads = [threading.Thread(target=work, args=(k,)) for k in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert failures == []
    assert clients[0].query("SYST:ERR?") == '0,"No error"'


def test_in_process_handle() -> None:
    source = SignalSource(VirtualClock())
    assert source.handle("FREQ 1 GHz;:OUTP ON") is None
    assert source.handle("FREQ?;:OUTP?") == "1000000000;1"
    assert source.output_on and source.freq_hz == 1e9
    source.reset_to_power_on()
    assert source.handle("*ESR?;:OUTP?") == "128;0"
