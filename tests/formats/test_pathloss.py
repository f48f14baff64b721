"""Path loss: constant, CSV table (linear interpolation, no extrapolation), Touchstone."""

import warnings
from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.pathloss import ConstantLoss, read_csv_loss, read_touchstone_loss


def test_constant() -> None:
    loss = ConstantLoss(6.2)
    np.testing.assert_allclose(loss.loss_db([1e9, 5e9]), [6.2, 6.2])
    assert loss.at(2.4e9) == 6.2


def test_csv_interpolates_linearly_in_frequency(tmp_path: Path) -> None:
    path = tmp_path / "rf.csv"
    path.write_text("freq_hz,loss_db\n1e9,2.0\n3e9,4.0\n2e9,3.5\n", encoding="utf-8")
    table = read_csv_loss(path, display="rf.csv", where="bench.toml:9: path_loss.rf")
    np.testing.assert_allclose(table.freq_hz, [1e9, 2e9, 3e9])  # rows sorted
    np.testing.assert_allclose(table.loss_db([1e9, 1.5e9, 2.5e9, 3e9]), [2.0, 2.75, 3.75, 4.0])


def test_csv_refuses_extrapolation(tmp_path: Path) -> None:
    path = tmp_path / "rf.csv"
    path.write_text("1e9,2.0\n3e9,4.0\n", encoding="utf-8")
    table = read_csv_loss(path, display="rf.csv", where="bench.toml:9: path_loss.rf")
    with pytest.raises(InputError) as info:
        table.loss_db([2e9, 3.5e9])
    assert "3.5 GHz" in info.value.what and "outside the table" in info.value.what
    assert info.value.where == "bench.toml:9: path_loss.rf"
    assert "extend the table" in (info.value.fix or "")


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("1e9,2.0\n", "at least 2 rows"),
        ("1e9,2.0\n2e9\n", "expected 2"),
        ("1e9,2.0\n2e9,abc\n", "not two numbers"),
        ("1e9,2.0\n1e9,3.0\n", "same frequency"),
        ("1e9,2.0\n2e9,nan\n", "finite"),
    ],
)
def test_csv_errors(tmp_path: Path, text: str, words: str) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=words):
        read_csv_loss(path, display="bad.csv", where="w")


def test_touchstone_matches_scikit_rf(tmp_path: Path) -> None:
    import skrf

    freq = skrf.Frequency(1.0, 3.0, 5, unit="GHz")
    s = np.full((5, 2, 2), 0.05 + 0.0j)  # a small, realistic port match
    s21 = np.array([0.9, 0.8, 0.7, 0.6, 0.5]) * np.exp(-1j * np.linspace(0, 3, 5))
    s[:, 1, 0] = s21
    s[:, 0, 1] = s21
    net = skrf.Network(frequency=freq, s=s, name="cable")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net.write_touchstone(str(tmp_path / "cable"))
    path = tmp_path / "cable.s2p"
    table = read_touchstone_loss(path, display="cable.s2p", where="w")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reread = skrf.Network(str(path))
    # scikit-rf's own |S21| in dB is the reference: loss = −s_db[:, 1, 0].
    np.testing.assert_allclose(table.loss_db(reread.f), -reread.s_db[:, 1, 0], atol=1e-9)
    np.testing.assert_allclose(table.loss_db([1e9]), [-20 * np.log10(0.9)], atol=1e-6)
    mid = table.loss_db([1.25e9])[0]  # halfway between the first two points
    assert mid == pytest.approx((-20 * np.log10(0.9) - 20 * np.log10(0.8)) / 2, abs=1e-6)
    with pytest.raises(InputError, match="outside the table"):
        table.loss_db([4e9])


def test_touchstone_missing(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="does not exist"):
        read_touchstone_loss(tmp_path / "x.s2p", display="x.s2p", where="w")
