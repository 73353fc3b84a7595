"""Issue 19 item 1: trapwork.work(..., uncertainty=FIT) carries the fit's covariance forward,
equal to ``trapwork work --uncertainty``; spreads that were not computed are None, never 0."""
import math

import numpy as np
import pytest

import trapwork
from conftest import EXAMPLES, cli_ok


def test_work_uncertainty_equals_cli(in_tmp):
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    start = EXAMPLES / "ion_spectroscopy_start.toml"
    fit = trapwork.fit(data, start=trapwork.Scenario.from_file(start), terms="frequency,cubic,quartic")
    fit.write(in_tmp / "fit")
    fitted = in_tmp / "fit" / "fitted.toml"
    cli_ok("work", fitted, "--uncertainty", in_tmp / "fit", "--uncertainty-method", "linear", "-o", in_tmp / "cli")
    r = trapwork.work(trapwork.Scenario.from_file(fitted), uncertainty=in_tmp / "fit", uncertainty_method="linear")
    spread = r.spread
    assert spread["method"] == "linear"
    assert spread["samples"] is None  # sampling not run: None, not 0
    mean = spread["results"][0]
    assert mean["name"] == "<W>" and mean["sd"] > 0 and mean["sd_sampled"] is None
    # The sd is a central difference of two runs: FFTW_MEASURE plans differ between processes by
    # rounding (1e-12 of P), which the difference quotient lifts to ~1e-10 of the sd; so the
    # module and the command line agree to 1e-6 relative here, not bit for bit.
    cli_table = np.genfromtxt(in_tmp / "cli" / "lines_uncertainty.csv", delimiter=",", names=True, comments="#")
    for name in ("probability", "probability_sd", "initial", "final"):
        np.testing.assert_allclose(np.asarray(r.tables["lines_uncertainty"][name]), cli_table[name], rtol=1e-6)
    import json
    cli = json.loads((in_tmp / "cli" / "summary.json").read_text())["calibration_uncertainty"]
    for a, b in zip(spread["results"], cli["results"]):
        assert a["name"] == b["name"]
        assert (a["sd"] is None and b["sd"] is None) or math.isclose(a["sd"], b["sd"], rel_tol=1e-6)
    assert "spread due to the trap's calibration" in r.report
    assert trapwork.work(trapwork.Scenario.from_file(fitted)).spread is None


def test_work_uncertainty_bad_file_is_input_error(in_tmp):
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.work(trapwork.Scenario.from_file(EXAMPLES / "ion_spectroscopy_start.toml"),
                      uncertainty=in_tmp / "nothing.json")
    assert "nothing.json" in str(caught.value)
