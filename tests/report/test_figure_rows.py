"""A slice of the figure table made into its frame (``figure_rows_frame``): with pyarrow
the flag names and single points are made by Arrow, without it one by one in Python; the
frames are the same, column types included."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

from sweeprig.analysis.figures import flag_bit, flags_from_mask
from sweeprig.report import tables
from sweeprig.report.tables import _flag_texts, _points_texts, figure_rows_frame, figure_slices


def _frames(run, monkeypatch: pytest.MonkeyPatch, arrow: bool, rows: int):
    with monkeypatch.context() as bare:
        if not arrow:
            bare.setattr(tables, "arrow_compute", lambda: None)
        return [figure_rows_frame(s) for s in figure_slices(run, rows=rows)]


@pytest.mark.parametrize("rows", [7, 100])
def test_the_frames_are_the_same_with_and_without_pyarrow(report_run, monkeypatch,
                                                          rows: int) -> None:
    made = _frames(report_run, monkeypatch, True, rows)
    plain = _frames(report_run, monkeypatch, False, rows)
    assert len(made) == len(plain) >= 1
    for one, other in zip(made, plain, strict=True):
        assert_frame_equal(one, other)
    every = [f for frame in made for f in frame["flags"].tolist() if f]
    assert every, "the run has flagged figures"
    points = [p for frame in made for p in frame["points"].tolist()]
    assert any(" " in p for p in points) and any(" " not in p for p in points)


def test_single_points_and_flag_masks_are_written_alike_either_way(monkeypatch) -> None:
    """The columns a large run's blocks give (one point number a figure, flag masks): the
    same texts and the type a frame gives strings, by Arrow or by Python."""
    points = np.array([0, 7, -3, 123456789012, 7, 2**40], dtype=np.int64)
    masks = np.array([0, flag_bit("in_noise"), flag_bit("in_noise") | flag_bit("overload"),
                      0, flag_bit("overload"), flag_bit("in_noise")], dtype=np.int64)
    made = pd.DataFrame({"points": _points_texts(points), "flags": _flag_texts(masks)})
    with monkeypatch.context() as bare:
        bare.setattr(tables, "arrow_compute", lambda: None)
        plain = pd.DataFrame({"points": _points_texts(points), "flags": _flag_texts(masks)})
    assert_frame_equal(made, plain)
    assert made["points"].tolist() == [str(p) for p in points.tolist()]
    assert made["flags"].tolist() == [" ".join(flags_from_mask(m)) for m in masks.tolist()]
    assert made["flags"].tolist()[:3] == ["", "in_noise", "in_noise overload"]
    empty = np.zeros(0, dtype=np.int64)
    assert len(_points_texts(empty)) == len(_flag_texts(empty)) == 0


@pytest.mark.parametrize("arrow", [True, False], ids=["pyarrow", "without"])
def test_a_slices_coded_texts_make_the_frame_its_texts_would(report_run, monkeypatch,
                                                             arrow: bool) -> None:
    """A slice carries its names, units, bounds, verdicts and text conditions as codes
    (CodedTexts); its frame is the one the texts themselves would make."""
    from sweeprig.report.tables import CodedTexts

    with monkeypatch.context() as bare:
        if not arrow:
            bare.setattr(tables, "arrow_compute", lambda: None)
        slices = list(figure_slices(report_run, rows=50))
        assert len(slices) > 2
        for one in slices:
            coded = {k for k, v in one.items() if isinstance(v, CodedTexts)}
            assert {"name", "unit", "bound", "verdict", "study"} <= coded
            texts = {k: (v.objects() if isinstance(v, CodedTexts) else v)
                     for k, v in one.items()}
            assert all(v.dtype == object for k, v in texts.items() if k in coded)
            assert_frame_equal(figure_rows_frame(one), figure_rows_frame(texts))
    verdicts = [v for one in slices for v in one["verdict"].objects().tolist()]
    assert "" in verdicts and len(set(verdicts)) > 1


def test_only_columns_of_texts_are_coded() -> None:
    from sweeprig.report.tables import CodedTexts

    texts = np.array(["dB", "dBm", "dB", ""], dtype=object)
    coded = CodedTexts.of(texts)
    assert isinstance(coded, CodedTexts) and coded.texts == ("dB", "dBm", "")
    assert coded.objects().tolist() == texts.tolist()
    for other in (np.array(["dB", None], dtype=object), np.array(["dB", 3.0], dtype=object)):
        assert CodedTexts.of(other) is other
    empty = CodedTexts.of(np.zeros(0, dtype=object))
    assert isinstance(empty, CodedTexts) and empty.objects().size == 0
    assert len(empty.column()) == 0
