"""Only the sequences a change touched: the files git says changed since a revision, and
whether a sequence (its own file, a fragment it includes, its golden figures or the part
file it names) is among them."""

from __future__ import annotations

import subprocess
from collections.abc import Iterable
from pathlib import Path

from sweeprig.errors import SweeprigError


def changed_files(revision: str, cwd: Path) -> frozenset[Path]:
    """Files changed between ``revision`` and the working tree (committed, staged or not),
    plus untracked ones, as resolved paths. Raises :class:`SweeprigError` when git cannot
    tell (not a repository, unknown revision)."""
    top = _git(["rev-parse", "--show-toplevel"], cwd).strip()
    root = Path(top)
    names = _git(["diff", "--name-only", revision, "--"], cwd).splitlines()
    names += _git(["ls-files", "--others", "--exclude-standard"], root).splitlines()
    return frozenset((root / n).resolve() for n in names if n.strip())


def _git(args: list[str], cwd: Path) -> str:
    try:
        done = subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True,
                              check=False, timeout=60)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise SweeprigError(f"git could not be run: {exc}", where="--changed-since",
                            fix="install git, or leave out --changed-since") from None
    if done.returncode != 0:
        raise SweeprigError(f"git {' '.join(args)} failed: {done.stderr.strip()}",
                            where="--changed-since",
                            fix="give a revision git knows (e.g. main, HEAD~3) and run "
                                "inside the repository")
    return done.stdout


def sequence_inputs(sequence_path: Path) -> tuple[Path, ...]:
    """The files a sequence test reads: the sequence, its fragments (all depths), its
    golden-figures file and the part file ``[part] sim_part`` names. A sequence that does
    not load yields itself only (its test will say why)."""
    from sweeprig.errors import SweeprigError as _Err
    from sweeprig.formats.sequence import load_sequence
    from sweeprig.seqtest.golden import golden_path

    paths = [sequence_path, golden_path(sequence_path)]
    try:
        sequence = load_sequence(sequence_path)
    except _Err:
        return (sequence_path.resolve(),)
    paths += [Path(p) for p, _ in sequence.included_files]
    sim_part = sequence.part.sim_part
    if sim_part and sim_part.lower().endswith(".toml"):
        paths.append(Path(sim_part))
    return tuple(p.resolve() for p in paths)


def touched(sequence_path: Path, changed: Iterable[Path]) -> bool:
    """True when any file the sequence's test reads is in ``changed``."""
    changed = frozenset(changed)
    return any(p in changed for p in sequence_inputs(sequence_path))
