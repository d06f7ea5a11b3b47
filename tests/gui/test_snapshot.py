"""``flakebook open PROJECT --snapshot FILE.png [--show ...]``: the window rendered offscreen.

Checked by pixel statistics, not against a reference picture (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtGui import QImage

from flakebook.cli import main


def _pixels(path) -> np.ndarray:
    img = QImage(str(path)).convertToFormat(QImage.Format.Format_RGB888)
    assert not img.isNull()
    w, h, bpl = img.width(), img.height(), img.bytesPerLine()
    buf = np.frombuffer(img.constBits(), np.uint8).reshape(h, bpl)[:, : 3 * w]
    # a copy: the view's memory belongs to the QImage, freed when this function returns
    return buf.reshape(h, w, 3).copy()


def _assert_not_blank(px: np.ndarray) -> None:
    assert px.shape[0] > 400 and px.shape[1] > 600
    assert px.std() > 20  # not one flat colour
    colours = np.unique(px[::4, ::4].reshape(-1, 3), axis=0)
    assert len(colours) > 100  # an image, text and widgets, not a blank frame


def test_snapshot_main_view(qapp, project_path, tmp_path):
    out = tmp_path / "main.png"
    assert main(["open", str(project_path), "--snapshot", str(out), "--show", "flake:Q3W-002"]) == 0
    px = _pixels(out)
    _assert_not_blank(px)
    # the micrograph's substrate colour is on screen (linear 0.30, 0.22, 0.40 encoded as sRGB)
    target = np.array([149, 130, 170])
    near = np.abs(px.astype(int) - target).sum(axis=2) < 30
    assert near.mean() > 0.05


def test_snapshot_catalogue(qapp, project_path, tmp_path):
    out = tmp_path / "catalogue.png"
    assert main(["open", str(project_path), "--snapshot", str(out), "--show", "catalogue"]) == 0
    _assert_not_blank(_pixels(out))


@pytest.mark.parametrize(
    "args",
    [
        ["--show", "nothing"],
        ["--show", "flake:NO-SUCH"],
        ["--snapshot", "out.jpg"],
    ],
)
def test_snapshot_refuses_bad_options(qapp, project_path, tmp_path, args, capsys):
    args = [a if a != "out.jpg" else str(tmp_path / "out.jpg") for a in args]
    if "--snapshot" not in args:
        args += ["--snapshot", str(tmp_path / "x.png")]
    assert main(["open", str(project_path), *args]) == 2
    err = capsys.readouterr().err
    assert "flakebook:" in err and "Traceback" not in err


def test_snapshot_process_exits_cleanly(project_path, tmp_path):
    """The command-line snapshot ends with exit code 0, not a crash while Qt tears down (the
    window is deleted, its workers stopped, before the interpreter exits). Run as the user
    runs it, in its own process, a few times: the fault was intermittent (common practice, no
    source)."""
    import subprocess
    import sys

    for i in range(3):
        out = tmp_path / f"s{i}.png"
        proc = subprocess.run(
            [sys.executable, "-m", "flakebook", "open", str(project_path), "--snapshot", str(out),
             "--show", "image"],
            capture_output=True, text=True, timeout=120,
        )  # fmt: skip
        assert proc.returncode == 0, (proc.returncode, proc.stderr[-500:])
        assert out.stat().st_size > 10_000
