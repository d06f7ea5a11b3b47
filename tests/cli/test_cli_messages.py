"""What the command line tells its user: help on every option, short messages for bad numbers,
no library warnings, and internal errors that say what to do next (INTERFACE.md exit codes and
messages of at most three lines; common practice, no source)."""

from __future__ import annotations

import argparse
import hashlib
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from flakebook.cli import build_parser, main


def run(capsys, *argv):
    """Exit code, stdout and stderr of one command (a parse error is an exit code too)."""
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse's own exit (--help, or an error before the fix)
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def _short_refusal(code, err, *fragments):
    lines = err.strip().splitlines()
    assert code == 2, err
    assert 1 <= len(lines) <= 3, err
    assert "usage:" not in err and "Traceback" not in err, err
    for f in fragments:
        assert f in err, err


# ---- item 12: a line of help for every option ------------------------------------------------


def _walk(parser: argparse.ArgumentParser, path: str):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helped = {a.dest: a.help for a in action._choices_actions}
            for name, sub in action.choices.items():
                yield f"{path} {name}", "(the command itself)", helped.get(name)
                yield from _walk(sub, f"{path} {name}")
            continue
        if isinstance(action, argparse._HelpAction):
            continue
        name = "/".join(action.option_strings) or action.dest
        yield path, name, action.help


def test_every_option_of_every_command_has_a_line_of_help():
    """`flakebook COMMAND --help` lists each option with a line of help (INTERFACE.md). Options
    hidden on purpose (help=argparse.SUPPRESS: the watcher's timing knobs) are left out."""
    missing = [
        f"{cmd}: {name}"
        for cmd, name, text in _walk(build_parser(), "flakebook")
        if text is not argparse.SUPPRESS and not (text or "").strip()
    ]
    assert missing == [], "options without help:\n" + "\n".join(missing)


# ---- item 12: bad numbers get one short message ----------------------------------------------


NEW = ["new", "PROJECT", "--sample", "S1", "--material", "MoSe2"]
LAYERS = ["layers", "--material", "MoSe2", "--wavelength-nm", "600", "--contrast", "0.1"]


@pytest.mark.parametrize(
    "argv, fragments",
    [
        ([*NEW, "--oxide-nm", "abc"], ["--oxide-nm", "'abc' is not a number", "accepted"]),
        ([*NEW, "--oxide-nm", "nan"], ["--oxide-nm", "'nan'", "accepted"]),
        ([*NEW, "--oxide-nm", "-inf"], ["--oxide-nm", "'-inf'", "accepted"]),
        ([*NEW, "--oxide-nm", "inf"], ["--oxide-nm", "'inf'", "accepted"]),
        (
            [*NEW, "--oxide-nm", "285", "--max-layers", "1.5"],
            ["--max-layers", "'1.5' is not a whole number", "accepted"],
        ),
        ([*LAYERS, "--oxide-nm", "285", "--max-layers", "x"], ["--max-layers", "accepted"]),
        ([*LAYERS, "--oxide-nm", "2e2", "--na-illumination", "nan"], ["--na-illumination"]),
        ([*LAYERS, "--oxide-nm"], ["--oxide-nm", "expected one argument"]),
        (["layers", "--oxide-nm", "285"], ["--material", "required"]),
        ([*LAYERS, "--oxide-nm", "285", "--geometry", "flat"], ["--geometry", "'flat'"]),
        (["no-such-command"], ["no-such-command"]),
    ],
)
def test_bad_numbers_and_options_get_a_short_message(tmp_path, capsys, argv, fragments):
    """A number that is not one, a whole number given as 1.5, nan and +-inf, a missing value:
    exit 2 with at most three lines naming the option, what is wrong and what is accepted, not
    argparse's usage text; nothing is created."""
    argv = [str(tmp_path / "p") if a == "PROJECT" else a for a in argv]
    code, out, err = run(capsys, *argv)
    _short_refusal(code, err, *fragments)
    assert out == "" and list(tmp_path.iterdir()) == []


def test_a_negative_number_in_scientific_notation_is_a_value(capsys):
    """`--dark-offset -1e-3` reaches the command's own check (a value below the accepted range)
    instead of being taken for an option (common practice, no source)."""
    code, _, err = run(
        capsys,
        "survey",
        "nothing.png",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--scale-um-per-px",
        "0.1",
        "--channels",
        "srgb",
        "--dark-offset",
        "-1e-3",
    )
    _short_refusal(code, err, "--dark-offset", "accepted")


def test_help_still_works(capsys):
    code, out, _ = run(capsys, "new", "--help")
    assert code == 0 and "--oxide-nm" in out


# ---- item 12: no numpy warnings on the terminal ----------------------------------------------


def test_numpy_warnings_never_reach_the_terminal():
    """A command whose numbers overflow or divide by zero prints its result, not numpy's
    RuntimeWarning (the runner silences them; core code reports its own warnings)."""
    code = (
        "import argparse, sys, numpy as np\n"
        "from flakebook.cli import _common\n"
        "def cmd(args):\n"
        "    np.log(np.zeros(2)); np.ones(1) / 0; np.exp(np.array([1e4]))\n"
        "    print('done')\n"
        "sys.exit(_common.run(cmd, argparse.Namespace()))\n"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert res.returncode == 0 and res.stdout == "done\n"
    assert res.stderr == "", res.stderr


# ---- item 12: internal errors say what to do next and where the log is ------------------------


def _boom(args):
    raise ZeroDivisionError("float division by zero")


def test_internal_error_names_its_log_and_what_to_do(monkeypatch, capsys, tmp_path):
    """Exit 1: at most three lines saying it is flakebook's fault, where the traceback was
    written (the user's state folder, XDG_STATE_HOME) and what to do; --debug shows it."""
    import flakebook.cli.optics as optics

    state = tmp_path / "state"
    monkeypatch.setenv("XDG_STATE_HOME", str(state))
    monkeypatch.setattr(optics, "_cmd_materials", _boom)
    code, out, err = run(capsys, "materials")
    lines = err.strip().splitlines()
    assert code == 1 and out == "" and 1 <= len(lines) <= 3, err
    assert "Traceback" not in err and "--debug" in err
    logs = list(state.rglob("*.log"))
    assert len(logs) == 1 and str(logs[0]) in err, err
    text = logs[0].read_text(encoding="utf-8")
    assert "Traceback" in text and "ZeroDivisionError" in text and "materials" in text

    code, _, err = run(capsys, "--debug", "materials")
    assert code == 1 and "Traceback" in err and "ZeroDivisionError" in err


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _json(out: str):
    return json.loads(out)


# ---- item 14: files that used to crash -------------------------------------------------------


def test_layers_csv_row_with_more_cells_than_the_header(tmp_path, capsys):
    """A row with more cells than the header is refused naming its line and the two counts
    (exit 2), not an internal error."""
    path = tmp_path / "m.csv"
    path.write_text("id,contrast,contrast_err\nF-01,0.40,0.02\nF-02,0.41,0.02,0.7,extra\n")
    code, out, err = run(
        capsys,
        "layers",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--wavelength-nm",
        "550",
        "--csv",
        path,
        "--format",
        "json",
    )
    _short_refusal(code, err, "m.csv", "line 3", "5 cells", "3 columns")
    assert out == ""


# ---- item 15: values that must be refused ------------------------------------------------------


def test_new_refuses_an_unknown_material_listing_the_known_ones(tmp_path, capsys):
    code, out, err = run(
        capsys, "new", tmp_path / "p", "--sample", "S1", "--material", "MoSe3", "--oxide-nm", "285"
    )
    _short_refusal(code, err, "'MoSe3'", "MoSe2", "WS2", "hBN")
    assert out == "" and list(tmp_path.iterdir()) == []


@pytest.fixture
def project(tmp_path, capsys):
    """A project (N_max 15) with one flake, made by `new` and the store's API."""
    from flakebook.store import Project

    code, out, err = run(
        capsys,
        "new",
        tmp_path / "k9",
        "--sample",
        "Q3-east",
        "--material",
        "WSe2",
        "--oxide-nm",
        "90",
        "--format",
        "json",
    )
    assert code == 0, err
    path = Path(_json(out)["project"])
    with Project.open(path) as p:
        p.add_flake(p.sample_by_name("Q3-east"), "Q3E-001")
    return path


@pytest.mark.parametrize(
    "layers, fragments",
    [
        ("99", ["--layers 99", "1 to 15"]),
        ("16", ["--layers 16", "1 to 15"]),
        ("0", ["--layers", "1 to 15"]),
        ("1.5", ["--layers", "1 to 15"]),
    ],
)
def test_assign_refuses_layers_beyond_the_projects_maximum(project, capsys, layers, fragments):
    """The project's N_max is 15: `assign --layers` accepts 1..15; the file is unchanged."""
    before = _sha(project)
    code, out, err = run(
        capsys, "assign", project, "--flake", "Q3E-001", "--layers", layers, "--reason", "AFM"
    )
    _short_refusal(code, err, *fragments)
    assert _sha(project) == before and out == ""


def test_assign_accepts_the_maximum(project, capsys):
    code, out, err = run(
        capsys, "assign", project, "--flake", "Q3E-001", "--layers", "15", "--reason", "AFM"
    )
    assert code == 0, err


@pytest.mark.parametrize("workers", ["0", "-2"])
def test_survey_refuses_zero_or_negative_workers(tmp_path, capsys, workers):
    code, out, err = run(
        capsys,
        "survey",
        tmp_path,
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--scale-um-per-px",
        "0.1",
        "--channels",
        "srgb",
        "--workers",
        workers,
    )
    _short_refusal(code, err, f"--workers {workers}", "accepted", "1 or more")


def test_survey_with_a_project_refuses_bad_workers_and_leaves_the_file(project, tmp_path, capsys):
    before = _sha(project)
    code, _, err = run(
        capsys,
        "survey",
        tmp_path,
        "--material",
        "WSe2",
        "--oxide-nm",
        "90",
        "--scale-um-per-px",
        "0.1",
        "--channels",
        "srgb",
        "--workers",
        "0",
        "--project",
        project,
    )
    _short_refusal(code, err, "--workers 0")
    assert _sha(project) == before


@pytest.mark.parametrize("text", ["1,,2", ",1", "1,", "1-", "-3", "2-1", "1-2-3", " , "])
def test_contrast_refuses_a_malformed_layer_list(capsys, text):
    """`--layers 1,,2` (an empty item) and other malformed lists are refused (exit 2) with the
    accepted forms, not read as 1,2."""
    code, out, err = run(
        capsys,
        "contrast",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--layers",
        text,
        "--wavelength-nm",
        "550",
    )
    _short_refusal(code, err, "--layers", "1-10", "1,2,5")
    assert out == ""


# ---- item 10: words and digits for people --------------------------------------------------------

_LONG_FLOAT = r"\d\.\d{5,}|\de-\d\d"  # 0.760209..., 7.56e-225, 9.2e-05


def test_info_counts_in_plain_words(project, capsys):
    """`info` as a table counts in plain words ("1 sample, 3 flakes", not "1 sample, 3 flake"
    or record kinds with underscores); JSON keeps the kinds' keys."""
    from flakebook.store import Project

    with Project.open(project) as p:
        s = p.sample_by_name("Q3-east")
        p.add_flake(s, "Q3E-002")
        p.add_flake(s, "Q3E-003")
    code, out, err = run(capsys, "info", project, "--format", "table")
    assert code == 0, err
    assert "1 sample, 3 flakes" in out, out
    assert "flake_hole" not in out and " 1 samples" not in out
    code, out, _ = run(capsys, "info", project, "--format", "json")
    assert _json(out)["counts"]["flake"] == 3


def test_assign_table_rounds_probabilities(project, capsys):
    """The evidence table gives probabilities as 0.76 (not 0.760209665135969) and the thick bin
    as >15L; JSON keeps full precision."""
    import numpy as np

    from flakebook.store import Project

    with Project.open(project) as p:
        flake = p.find_flake("Q3E-001")
        like = np.full(16, 1e-3)
        like[15] = 1.0
        p.add_evidence(flake, like, method="optical contrast (thin-film model)", reason="test")
        p.add_assignment(flake, 2, probability=0.760209665135969, method="combined evidence")
    code, out, err = run(capsys, "assign", project, "--flake", "Q3E-001", "--format", "table")
    assert code == 0, err
    assert "0.76" in out and "0.760209" not in out, out
    assert ">15L" in out and "more than" not in out, out
    assert not re.search(_LONG_FLOAT, out), out
    code, out, _ = run(capsys, "assign", project, "--flake", "Q3E-001", "--format", "json")
    assert _json(out)["assignment"]["probability"] == 0.760209665135969


def test_layers_table_rounds_and_names_the_thick_bin(capsys):
    """`layers` as a table: probability to two decimals, the thick bin as >15L, the contrast's
    one definition on stderr."""
    code, out, err = run(
        capsys,
        "layers",
        "--material",
        "MoSe2",
        "--oxide-nm",
        "285",
        "--wavelength-nm",
        "550",
        "--contrast",
        "0.40",
        "--contrast-err",
        "0.02",
        "--format",
        "table",
    )
    assert code == 0, err
    assert not re.search(_LONG_FLOAT, out), out
    assert "C = (R_reference - R_flake)/R_reference" in err and ">15L" in err


def test_contrast_reason_rounds_to_its_error():
    """The evidence's reason: contrast to the digits its error supports (+0.469120 ± 0.000092,
    not ±9.2e-05)."""
    from flakebook.pipeline import contrast_reason

    text = contrast_reason({"r": 0.46912, "g": 0.25}, {"r": 9.2e-05, "g": 0.0017}, "supported", "x")
    assert "r +0.469120 ± 0.000092" in text and "g +0.2500 ± 0.0017" in text, text
    assert "e-0" not in text


def test_evidence_source_names_the_published_data_not_a_module():
    from flakebook.optics.materials import get_material
    from flakebook.pipeline import optics_source

    text = optics_source(get_material("MoSe2"))
    assert "Hsu et al. 2019" in text and "Munkhbat et al. 2022" in text, text
    assert "flakebook." not in text and "transfer-matrix" in text
    assert "Grudinin" in optics_source(get_material("hBN"))


# ---- item 11: one name for each concept ------------------------------------------------------------

ROOT = Path(__file__).resolve().parents[2]
# Text the user reads outside the window (the window's words are gui/'s own): the command
# line, the core's messages, the README and the user's copy of the interface.
_USER_TEXT = [
    *sorted((ROOT / "flakebook").glob("*.py")),
    *sorted((ROOT / "flakebook" / "cli").glob("*.py")),
    *sorted((ROOT / "flakebook" / "optics").glob("*.py")),
    *sorted((ROOT / "flakebook" / "imaging").glob("*.py")),
    *sorted((ROOT / "flakebook" / "thermal").glob("*.py")),
    ROOT / "README.md",
    ROOT / "docs" / "interface.md",
]


@pytest.mark.parametrize(
    "other",
    [
        "dark frame",
        "black level",
        "I_flake/I_reference",
        "I_flake / I_reference",
        "I_flake / I_substrate",
    ],
)
def test_one_name_for_the_dark_offset_and_one_contrast_wording(other):
    """The camera's no-light level is the "dark offset" everywhere; the contrast is worded
    C = (R_reference - R_flake)/R_reference (DESIGN.md), not also by intensities."""
    found = [
        f"{p.relative_to(ROOT)}:{i}"
        for p in _USER_TEXT
        for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
        if other.lower() in line.lower()
    ]
    assert found == [], f"{other!r} in: {', '.join(found)}"


def test_contrast_definition_is_worded_once(capsys):
    """README, docs/interface.md and `flakebook contrast --help` use the one wording."""
    from flakebook.wording import CONTRAST_DEFINITION

    code, out, _ = run(capsys, "contrast", "--help")
    assert code == 0
    assert "C = (R_reference - R_flake)/R_reference" in " ".join(out.split())
    for doc in (ROOT / "README.md", ROOT / "docs" / "interface.md"):
        text = " ".join(doc.read_text(encoding="utf-8").split())
        assert CONTRAST_DEFINITION in text, doc.name


def test_the_thick_bin_is_written_one_way():
    """ ">15L" (N_max + 1 in JSON lists), in README and docs, not "more than 15" as a name."""
    for doc in (ROOT / "README.md", ROOT / "docs" / "interface.md"):
        text = doc.read_text(encoding="utf-8")
        assert '"more than 15"' not in text and '"more than max-layers"' not in text, doc.name
        assert ">15L" in text, doc.name


def test_survey_help_says_what_a_region_is(capsys):
    """A terrace is not also a "region" to the user: the JSON key keeps its name, and the help
    says what it holds."""
    code, out, _ = run(capsys, "survey", "--help")
    text = " ".join(out.split())
    assert code == 0 and "terraces" in text and '"regions"' in text
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "region" not in readme.replace('"regions"', ""), "README: say terrace"
