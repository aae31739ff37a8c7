"""Simulation-based calibration through the model probe, judged by scipy.

Talts, Betancourt, Simpson, Vehtari & Gelman (2018), "Validating Bayesian
inference algorithms with simulation-based calibration": the ranks of prior
draws among posterior draws fitted to data simulated from them are uniform
when the posterior is right. The probe's `calibrate` action returns the ranks
(0..99 over 99 kept draws per fit) and its own chi-square statistic;
scipy.stats.chisquare on ten equal bins must give the same statistic and not
reject at 1%.
"""
import numpy as np
import pytest
import scipy.stats as st


def assert_ranks_uniform(probe, columns, model, seed, reps=150, draws=297):
    """Run `calibrate` for `model` on `columns` and check every parameter's
    ranks with scipy; returns the probe's answer for further checks."""
    answer = probe("model", {"action": "calibrate", "columns": columns, "model": model,
                             "reps": reps, "seed": seed, "draws": draws})
    assert "error" not in answer, answer
    assert answer["reps"] == reps and answer["failures"] == 0
    for p in answer["parameters"]:
        observed = np.bincount(np.asarray(p["ranks"]) // 10, minlength=10)
        reference = st.chisquare(observed)
        assert p["chi_square"] == pytest.approx(reference.statistic, rel=1e-9)
        assert reference.pvalue > 0.01, (p["name"], reference)
    return answer
