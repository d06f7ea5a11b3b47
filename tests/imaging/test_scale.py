"""Image scale from objective presets and from a line of known length."""

from __future__ import annotations

import json
import math

import pytest

from flakebook.errors import InputError
from flakebook.imaging.scale import load_objectives, scale_from_line, scale_from_objective


def test_shipped_presets_are_marked_as_examples():
    table = load_objectives()
    assert {"5x", "10x", "20x", "50x", "100x"} <= set(table)
    assert all(o.example for o in table.values())
    s = scale_from_objective("50x", table)
    assert s.method == "objective" and "example" in s.source
    # Scale goes as 1/magnification for one camera (geometric optics, common practice).
    assert table["5x"].um_per_px * 5 == pytest.approx(table["100x"].um_per_px * 100, rel=1e-9)


def test_unknown_objective_and_bad_table(tmp_path):
    with pytest.raises(InputError, match="accepted: 5x"):
        scale_from_objective("63x")
    bad = tmp_path / "obj.json"
    bad.write_text(json.dumps({"objectives": [{"name": "x"}]}))
    with pytest.raises(InputError, match="not a usable objective table"):
        load_objectives(bad)


def test_scale_from_line():
    """A 10-pitch line over a 4 um hole lattice, 3-4-5 triangle: 40 um over 500 px."""
    s = scale_from_line((10, 20), (310, 420), 40.0, endpoint_err_px=0.5)
    assert s.um_per_px == pytest.approx(40.0 / 500.0, rel=1e-12)
    assert s.um_per_px_err == pytest.approx(s.um_per_px * math.sqrt(2) * 0.5 / 500, rel=1e-9)
    with pytest.raises(InputError):
        scale_from_line((0, 0), (1, 0), 5.0)
    with pytest.raises(InputError):
        scale_from_line((0, 0), (100, 0), -5.0)
