"""``flakebook survey`` on the command line: JSON contract, bad files, folders and --watch."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import cv2
import pytest

from .scenes import flake_grid, micrograph
from .synth import to_srgb8

ROOT = Path(__file__).resolve().parents[2]
ARGS = [
    "--material",
    "MoSe2",
    "--oxide-nm",
    "285",
    "--scale-um-per-px",
    "0.1",
    "--channels",
    "srgb",
    "--na-illumination",
    "0.3",
    "--dark-offset",
    "0.02",
]


def _env():
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def _run(*args, timeout=120):
    return subprocess.run(
        [sys.executable, "-m", "flakebook", "survey", *args],
        capture_output=True,
        text=True,
        env=_env(),
        timeout=timeout,
    )


def _png(path, seed=0):
    shape = (200, 330)
    flakes, _ = flake_grid(shape, [1, 2, 3], seed=seed)
    cv2.imwrite(str(path), to_srgb8(micrograph(shape, flakes, seed=seed))[..., ::-1])


def test_survey_json_contract(tmp_path):
    """INTERFACE.md: {"images": [{"path", "regions": [...], "holes": [...], "warnings"}]}."""
    _png(tmp_path / "a.png")
    out = _run(str(tmp_path / "a.png"), *ARGS, "--format", "json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    (im,) = data["images"]
    assert im["path"].endswith("a.png")
    assert len(im["regions"]) == 3
    r = im["regions"][0]
    for key in (
        "id",
        "centroid_px",
        "area_um2",
        "contrast",
        "contrast_err",
        "layers",
        "probability",
        "ambiguous_with",
        "likelihood",
    ):
        assert key in r
    assert set(r["contrast"]) == {"r", "g", "b"}
    assert sorted(x["layers"] for x in im["regions"]) == [1, 2, 3]


def test_bad_file_exit_2_with_short_message(tmp_path):
    bad = tmp_path / "scan.tif"
    bad.write_text("stage log\n")
    out = _run(str(bad), *ARGS)
    assert out.returncode == 2
    assert "not an image file" in out.stderr
    assert len(out.stderr.strip().splitlines()) <= 3
    out = _run(str(tmp_path / "a.png"), *ARGS[:-2], "--dark-offset", "2")
    assert out.returncode == 2 and "--dark-offset" in out.stderr


def test_folder_with_two_workers(tmp_path):
    for k in range(2):
        _png(tmp_path / f"t{k}.png", seed=k)
    (tmp_path / "notes.txt").write_text("ignored: not an image suffix")
    out = _run(str(tmp_path), *ARGS, "--workers", "2", "--format", "json", timeout=240)
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert [Path(i["path"]).name for i in data["images"]] == ["t0.png", "t1.png"]
    assert all(len(i["regions"]) == 3 for i in data["images"])


def test_watch_surveys_a_file_written_in_pieces_and_stops_on_ctrl_c(tmp_path):
    """--watch waits until a new file is complete, prints one JSON line, and Ctrl-C (SIGINT)
    stops it cleanly with exit code 130 (INTERFACE.md)."""
    src = tmp_path / "src.png"
    _png(src, seed=4)
    data = src.read_bytes()
    watched = tmp_path / "camera"
    watched.mkdir()
    (watched / "old.png").write_bytes(data)  # already there: left alone
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "flakebook",
            "survey",
            str(watched),
            *ARGS,
            "--watch",
            "--stable-s",
            "0.3",
            "--poll-s",
            "0.1",
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=_env(),
    )
    try:
        deadline = time.time() + 60
        while time.time() < deadline and b"watching" not in _peek(proc):
            time.sleep(0.2)
        target = watched / "new.png"
        with open(target, "wb") as fh:
            fh.write(data[:200])
            fh.flush()
            time.sleep(0.5)
            fh.write(data[200:])
        line = proc.stdout.readline()
        image = json.loads(line)
        assert image["path"].endswith("new.png")
        assert len(image["regions"]) == 3
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=30)
        assert proc.returncode == 130
        err = proc.stderr.read()
        assert "Traceback" not in err
    finally:
        if proc.poll() is None:
            proc.kill()


_stderr_seen: dict = {}


def _peek(proc) -> bytes:
    """Whatever stderr has so far (non-blocking), accumulated."""
    import select

    buf = _stderr_seen.setdefault(proc.pid, b"")
    while select.select([proc.stderr], [], [], 0)[0]:
        chunk = os.read(proc.stderr.fileno(), 4096)
        if not chunk:
            break
        buf += chunk
    _stderr_seen[proc.pid] = buf
    return buf


@pytest.mark.parametrize("opt", [["--project", "x.flakebook"]])
def test_project_option_refused_clearly(tmp_path, opt):
    _png(tmp_path / "a.png")
    out = _run(str(tmp_path / "a.png"), *ARGS, *opt)
    assert out.returncode == 2 and "--project" in out.stderr
