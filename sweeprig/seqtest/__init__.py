"""Sequence files tested like code: a pytest plugin and what it stands on.

:mod:`.shape` (is this TOML file a sequence?), :mod:`.judge` (check, pre-flight, run on the
simulated bench, judge against the sequence's own limits, a readable table of what missed),
:mod:`.golden` (expected figures with tolerances beside a sequence), :mod:`.changed` (only
the sequences a git revision range touched), :mod:`.plugin` (the pytest hooks, registered
by the ``pytest11`` entry point).
"""
