"""A fit saved in its report folder is rebuilt exactly."""

import numpy as np
import pytest

from deepwell.core.errors import InputError
from deepwell.fit.joint import fit_joint
from deepwell.report.writer import write_report
from deepwell.results import analyse
from deepwell.results.saved_fit import load_fit
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings


def test_saved_fit_rebuilds_values_and_covariance(small_scenario, tmp_path):
    obs = read_observations(small_scenario)
    res = fit_joint(obs, Settings())
    write_report(res, tmp_path / "rep", analyse(res), figures=False)
    again = load_fit(tmp_path / "rep")
    # the rebuilt fit is the same computation on the same numbers: equal to 1e-9
    np.testing.assert_allclose(again.values, res.values, rtol=1e-12)
    np.testing.assert_allclose(again.cov, res.cov, rtol=1e-6, atol=1e-12)
    assert again.chi2 == pytest.approx(res.chi2, rel=1e-12)


def test_changed_table_refuses_the_saved_fit(small_scenario, tmp_path):
    import shutil

    scen = tmp_path / "scen"
    shutil.copytree(small_scenario, scen)
    res = fit_joint(read_observations(scen), Settings())
    write_report(res, tmp_path / "rep", analyse(res), figures=False)
    with (scen / "velocities.csv").open("a") as fh:
        fh.write("t-1,2023.5,100.0,15.0,spectra\n")
    with pytest.raises(InputError, match="changed since the fit"):
        load_fit(tmp_path / "rep")
