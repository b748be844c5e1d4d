"""The StRD check against NIST's own numbers, written here as literals, not read through the project.

The certified values below are copied from the NIST StRD nonlinear regression files (the
"Certified Values" block of each .dat file). The pass bar is the one NIST's StRD documentation
and common practice use for nonlinear regression: at least 6 agreeing digits (LRE) in every
parameter, 6 in the residual sum of squares and 4 in every standard deviation.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from audit.cli import main
from audit.engine.batch import BatchFit
from audit.engine.outcomes import Outcome
from audit.validation.grade import Verdict, grade_runs, reference_model
from audit.validation.reference import log_relative_error

#: The published bar, digits: parameters, SSR, standard deviations.
PARAMS_DIGITS, SSR_DIGITS, SD_DIGITS = 6, 6, 4

#: name: (start 1, start 2, certified parameters, certified standard deviations, SSR, degrees of freedom)
CERTIFIED = {
    "Misra1a": ([500, 0.0001], [250, 0.0005], [2.3894212918e02, 5.5015643181e-04],
                [2.7070075241e00, 7.2668688436e-06], 1.2455138894e-01, 12),
    "MGH09": ([25, 39, 41.5, 39], [0.25, 0.39, 0.415, 0.39],
              [1.9280693458e-01, 1.9128232873e-01, 1.2305650693e-01, 1.3606233068e-01],
              [1.1435312227e-02, 1.9633220911e-01, 8.0842031232e-02, 9.0025542308e-02], 3.0750560385e-04, 7),
    "Nelson": ([2, 0.0001, -0.01], [2.5, 0.000000005, -0.05], [2.5906836021e00, 5.6177717026e-09, -5.7701013174e-02],
               [1.9149996413e-02, 6.1124096540e-09, 3.9572366543e-03], 3.7976833176e00, 125),
    "BoxBOD": ([1, 1], [100, 0.75], [2.1380940889e02, 5.4723748542e-01], [1.2354515176e01, 1.0455993237e-01],
               1.1680088766e03, 4),
}


@pytest.mark.parametrize("name", sorted(CERTIFIED))
def test_the_reader_gives_the_published_values(nist, name):
    start1, start2, params, sds, ssr, dof = CERTIFIED[name]
    reference = nist(name)
    # Reference: the literals above, copied from the certified file.
    np.testing.assert_array_equal(reference.start1, start1)
    np.testing.assert_array_equal(reference.start2, start2)
    np.testing.assert_array_equal(reference.certified, params)
    np.testing.assert_array_equal(reference.certified_sd, sds)
    assert reference.ssr == ssr and reference.dof == dof


def test_log_relative_error_counts_digits_and_none_for_a_missing_estimate():
    # Hand derivation: LRE = -log10(|e - c| / |c|); 1.00001 against 1 agrees to 5 digits, and
    # 11 is the cap (the files print 11 significant digits).
    assert log_relative_error(1.00001, 1.0) == pytest.approx(5.0, abs=1e-6)
    assert log_relative_error(-2.0e-3 * (1 + 1e-7), -2.0e-3) == pytest.approx(7.0, abs=1e-6)
    assert log_relative_error(1.0, 1.0) == 11.0
    # A missing estimate (NaN from a failed fit, an infinite one) has no agreeing digit at all.
    np.testing.assert_array_equal(log_relative_error([np.nan, np.inf, -np.inf], 1.0), 0.0)


def misra1a_by_hand(params: np.ndarray, x: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """SSR and asymptotic SDs of y = b1·(1 − exp(−b2·x)), Jacobian and s²(JᵀJ)⁻¹ written out
    (Seber & Wild, Nonlinear Regression, §2.1): ∂/∂b1 = 1 − e^(−b2 x), ∂/∂b2 = b1·x·e^(−b2 x)."""
    b1, b2 = params
    decay = np.exp(-b2 * x)
    residual = y - b1 * (1 - decay)
    jacobian = np.column_stack([1 - decay, b1 * x * decay])
    ssr = float(residual @ residual)
    covariance = ssr / (len(y) - 2) * np.linalg.inv(jacobian.T @ jacobian)
    return ssr, np.sqrt(np.diag(covariance))


def test_the_pass_rule_is_nists_bar_of_6_6_and_4_digits(nist):
    reference = nist("Misra1a")
    certified = np.array(CERTIFIED["Misra1a"][2])
    certified_ssr, certified_sd = CERTIFIED["Misra1a"][4], np.array(CERTIFIED["Misra1a"][3])
    # Runs placed at known distances from the certified point, all declared converged.
    shifts = np.array([1e-9, 1e-7, 5e-7, 3e-6, 1e-5, 1e-4, 1e-3, 1e-2, 0.05])
    params = certified * (1 + shifts[:, None] * np.array([1.0, -1.0]))
    fitted = reference_model(reference)
    runs = len(shifts)
    fit = BatchFit(params=params, ssr=np.array([misra1a_by_hand(p, reference.x, reference.y)[0] for p in params]),
                   iterations=np.ones(runs, int), outcome=np.full(runs, Outcome.CONVERGED),
                   max_rel_change=np.zeros(runs),
                   step_factor=np.ones(runs), names=reference.names, method="lm")
    grades = grade_runs(fitted, fit)
    expected = []
    for point in params:
        ssr, sds = misra1a_by_hand(point, reference.x, reference.y)
        lre = lambda value, true: np.clip(-np.log10(np.abs(value - true) / np.abs(true)), 0, 11)  # noqa: E731
        digits = (lre(point, certified).min(), lre(ssr, certified_ssr), lre(sds, certified_sd).min())
        if digits[1] < SSR_DIGITS:
            expected.append(Verdict.OTHER_SOLUTION if ssr > certified_ssr else Verdict.BELOW_CERTIFIED)
        elif digits[0] >= PARAMS_DIGITS and digits[2] >= SD_DIGITS:
            expected.append(Verdict.PASS)
        else:
            expected.append(Verdict.EQUIVALENT if digits[0] < 1 else Verdict.FEW_DIGITS)
    assert list(grades.verdict) == expected
    # The runs straddle every edge of the rule, so no threshold can move unnoticed.
    assert {Verdict.PASS, Verdict.FEW_DIGITS, Verdict.OTHER_SOLUTION} <= set(expected)


def test_strd_exit_statuses_and_max_iterations(tmp_path, nist_dir, capsys):
    (tmp_path / "Misra1a.dat").symlink_to(nist_dir / "Misra1a.dat")
    assert main(["strd", str(tmp_path), "--json"]) == 0
    passed = json.loads(capsys.readouterr().out)
    assert passed["counts"] == {"problems": 1, "passed_start1": 1, "passed_start2": 1}
    # Three iterations do not reach the minimum from either published start: exit 1, stalled.
    assert main(["strd", str(tmp_path), "--max-iterations", "3", "--json"]) == 1
    stopped = json.loads(capsys.readouterr().out)
    runs = [run for start in stopped["problems"][0]["starts"] for run in start["runs"]]
    assert [(run["outcome"], run["iterations"]) for run in runs] == [("stalled", 3), ("stalled", 3)]
    assert main(["strd", str(tmp_path), "--max-iterations", "0"]) == 2
    assert "--max-iterations 0" in capsys.readouterr().err
