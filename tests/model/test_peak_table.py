"""The shipped peak-factor table: what scipy computes, read back bit for bit, interpolated as scipy does."""

from __future__ import annotations

import numpy as np
import pytest

from howl.model import _peak_table as pt
from howl.model import plan as pl


def test_the_shipped_table_is_what_scipy_builds():
    # reference: scipy.special.chndtr/chndtrix and scipy.integrate.simpson (build_table), rebuilt here.
    # Not bit for bit: scipy's special functions differ in the last digits between releases (seen: 1.3e-9 dB
    # with scipy 1.17); 1e-6 dB is far below the 0.01 dB the plan prints.
    np.testing.assert_allclose(pt.table(), pt.build_table(), rtol=0, atol=1e-6)


def test_the_table_uses_the_plan_spread_quantiles():
    assert pt.SPREAD_QUANTILES == pl.SPREAD_QUANTILES


def test_bilinear_interpolation_matches_scipy_regular_grid_interpolator():
    # reference: scipy.interpolate.RegularGridInterpolator(method="linear"), what plan used before the table shipped
    from scipy.interpolate import RegularGridInterpolator

    rgi = RegularGridInterpolator((pt.LOGN, pt.LOGK), pt.table(), bounds_error=False, fill_value=None)
    rng = np.random.default_rng(21)
    pts = np.column_stack([rng.uniform(pt.LOGN[0], pt.LOGN[-1], 500), rng.uniform(pt.LOGK[0], pt.LOGK[-1], 500)])
    gn, gk = np.meshgrid(pt.LOGN, pt.LOGK, indexing="ij")  # the grid points themselves, edges included
    pts = np.vstack([pts, np.column_stack([gn.ravel(), gk.ravel()])])
    assert np.array_equal(pt.interpolate(pts[:, 0], pts[:, 1]), rgi(pts))


def test_a_plan_does_not_import_scipy_for_the_peak_factor():
    import subprocess
    import sys

    code = ("import sys\nfrom howl.model.plan import peak_factor_db\npeak_factor_db(4000.0, 2.0, 0.5)\n"
            "print(sorted(m for m in sys.modules if m.startswith('scipy')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize("bad", [np.nan])
def test_a_nan_k_factor_reads_as_zero(bad):
    # K unknown is taken as a fully diffuse band (K = 0), as before
    assert np.array_equal(np.asarray(pl.peak_factor_db(1000.0, 1.0, bad)), np.asarray(pl.peak_factor_db(1000.0, 1.0, 0.0)))
