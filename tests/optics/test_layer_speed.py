"""What keeps the layer likelihood's import path short: the chi-square quantiles it ships agree
with scipy (a general-purpose reference library), and a likelihood at an exact oxide needs
neither scipy.special nor scipy.interpolate (their imports cost a survey's start several hundred
ms; common practice, no source)."""

from __future__ import annotations

import subprocess
import sys

from scipy.special import chdtri

from flakebook.optics import layers


def test_chi_square_table_matches_scipy():
    for k, v in layers._CHI2_999.items():
        assert v == float(chdtri(k, 1e-3)), k
    # Beyond the table, scipy's own value.
    assert layers._chi2_upper_1e3(11) == float(chdtri(11, 1e-3))
    # Statistical tables give the 0.999 quantile of 1, 2 and 3 degrees of freedom as 10.828,
    # 13.816 and 16.266 (NIST/SEMATECH e-Handbook, critical values of the chi-square
    # distribution; 2 dof is -2 ln 1e-3 exactly).
    assert [round(layers._CHI2_999[k], 3) for k in (1, 2, 3)] == [10.828, 13.816, 16.266]


def test_likelihood_at_exact_oxide_imports_no_scipy():
    code = (
        "import sys\n"
        "from flakebook.optics.layers import layer_likelihood\n"
        "from flakebook.optics.materials import get_material\n"
        "from flakebook.optics.microscope import Microscope\n"
        "from flakebook.optics.substrate import parse_substrate\n"
        "layer_likelihood({'r': 0.2, 'g': 0.3, 'b': 0.1}, {'r': 0.01, 'g': 0.01, 'b': 0.01},\n"
        "    material=get_material('MoSe2'), substrate=parse_substrate('SiO2:285,Si'),\n"
        "    microscope=Microscope(na_illumination=0.3))\n"
        "print(' '.join(sorted(m for m in sys.modules if m.startswith('scipy'))))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.split()
    assert "scipy.special" not in out and "scipy.interpolate" not in out, out


def test_separation_of_all_rows_is_that_of_each():
    import numpy as np

    from flakebook.optics.layers_explain import separation_needed, separation_needed_rows

    rng = np.random.default_rng(0)
    for n in (1, 2, 3, 4, 9):
        e = rng.uniform(0, 0.05, (2000, n))
        assert separation_needed_rows(e, 0.005) == [separation_needed(r, 0.005) for r in e]
