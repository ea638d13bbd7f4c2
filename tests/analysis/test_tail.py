"""Tail fit D(f) = A f^β against synthetic Poisson processes with known β and A (exact sampling)."""

import json

import numpy as np
import pytest
from scipy import optimize, stats

from eigenfarm.analysis.tail import (FEW_SAMPLES, MIN_TAIL_MODES, check_lowest_modes, fit_prefactor,
                                     fit_tail, minimum_survival, select_tail)
from eigenfarm.errors import InputError

# unequal sizes and cutoffs across samples (reduced units: n_dof = 3 N, cutoffs in ω)
DOFS = np.array([3000, 6000, 12000, 4500])
CUTS = np.array([0.50, 0.42, 0.36, 0.46])


def draw_sample(rng, beta, prefactor, n_dof, cutoff, f_lo=0.0):
    """One sample of the Poisson process n_dof·A·f^β on (f_lo, cutoff]: a Poisson number of modes, each
    by inverting F(f) = (f^a − f_lo^a)/(cutoff^a − f_lo^a), a = β + 1 (exact sampling, common practice)."""
    a = beta + 1
    count = rng.poisson(n_dof * prefactor * (cutoff**a - f_lo**a) / a)
    return (f_lo**a + rng.random(count) * (cutoff**a - f_lo**a)) ** (1 / a)


def draw(rng, beta, prefactor, n_samples, f_lo=0.0):
    dofs, cuts = np.resize(DOFS, n_samples), np.resize(CUTS, n_samples)
    return [draw_sample(rng, beta, prefactor, d, c, f_lo) for d, c in zip(dofs, cuts)], dofs, cuts


def prefactor_for(beta, modes_per_sample):
    """A giving on average ``modes_per_sample`` modes below the cutoffs of DOFS/CUTS."""
    a = beta + 1
    return modes_per_sample * len(DOFS) / np.sum(DOFS * CUTS**a / a)


def test_one_sample_common_cutoff_matches_closed_form():
    # truncated power law on (0, f_c]: β̂ + 1 = n / Σ ln(f_c/f_i), Â = n (β̂+1) / (n_dof f_c^(β̂+1))
    # (standard maximum-likelihood result; common practice, from memory)
    rng = np.random.default_rng(11)
    f = draw_sample(rng, 3.0, 40.0, 3000, 0.45)
    fit = fit_tail([f], 3000, 0.45, n_boot=0)
    a = len(f) / np.log(0.45 / f).sum()
    assert fit.exponent.value + 1 == pytest.approx(a, rel=1e-11)
    assert fit.prefactor.value == pytest.approx(len(f) * a / (3000 * 0.45**a), rel=1e-9)


def test_estimates_and_profile_intervals_match_direct_maximisation():
    # the same likelihood maximised and profiled numerically by scipy.optimize (reference library);
    # f_lo > 0, unequal cutoffs and sizes exercise every term of Z(β)
    rng = np.random.default_rng(12)
    f_lo = 0.08
    freqs, dofs, cuts = draw(rng, 4.0, prefactor_for(4.0, 15), 8, f_lo)
    fit = fit_tail(freqs, dofs, cuts, f_lo, n_boot=0, fixed_exponent=4.0)
    kept = np.concatenate([f[f > f_lo] for f in freqs])
    n, log_sum = len(kept), np.log(kept).sum()

    def loglik(log_a, beta):
        z = np.sum(dofs * (cuts ** (beta + 1) - f_lo ** (beta + 1)) / (beta + 1))
        return n * log_a + beta * log_sum - np.exp(log_a) * z

    best = optimize.minimize(lambda p: -loglik(*p), [0.0, 3.0], method="Nelder-Mead",
                             options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    assert fit.exponent.value == pytest.approx(best.x[1], abs=1e-6)
    assert fit.prefactor.value == pytest.approx(np.exp(best.x[0]), rel=1e-5)
    floor = -best.fun - stats.chi2.ppf(0.95, 1) / 2  # Wilks' theorem, χ²₁ (from memory)
    over_log_a = lambda b: -optimize.minimize_scalar(lambda t: -loglik(t, b), bracket=(-5, 5)).fun - floor
    over_beta = lambda t: -optimize.minimize_scalar(lambda b: -loglik(t, b), bracket=(2, 6)).fun - floor
    b_hat, t_hat = best.x[1], best.x[0]
    assert fit.exponent.profile == pytest.approx(
        (optimize.brentq(over_log_a, b_hat - 5, b_hat), optimize.brentq(over_log_a, b_hat, b_hat + 5)),
        abs=1e-6)
    assert fit.prefactor.profile == pytest.approx(
        np.exp([optimize.brentq(over_beta, t_hat - 8, t_hat), optimize.brentq(over_beta, t_hat, t_hat + 8)]),
        rel=1e-5)
    fixed = lambda t: loglik(t, 4.0) - loglik(np.log(fit.fixed_prefactor.value), 4.0) + stats.chi2.ppf(0.95, 1) / 2
    t4 = np.log(fit.fixed_prefactor.value)
    assert fit.fixed_prefactor.profile == pytest.approx(
        np.exp([optimize.brentq(fixed, t4 - 3, t4), optimize.brentq(fixed, t4, t4 + 3)]), rel=1e-9)


@pytest.mark.parametrize("beta", [3.0, 4.0])
def test_fit_recovers_truth_inside_its_intervals(beta):
    rng = np.random.default_rng(int(beta))
    prefactor = prefactor_for(beta, 12)
    freqs, dofs, cuts = draw(rng, beta, prefactor, 40, f_lo=0.05)
    fit = fit_tail(freqs, dofs, cuts, 0.05, fixed_exponent=beta, n_boot=1000, seed=3)
    assert fit.bootstrap_reliable and fit.n_samples == 40
    for estimate, truth in [(fit.exponent, beta), (fit.prefactor, prefactor),
                            (fit.fixed_prefactor, prefactor)]:
        for low, high in (estimate.profile, estimate.bootstrap):
            assert low < estimate.value < high
            assert low <= truth <= high
    assert fit.exponent.profile[1] - fit.exponent.profile[0] < 1.5  # ~480 modes pin β to ± 0.5


@pytest.mark.parametrize("beta", [3.0, 4.0])
def test_interval_coverage_over_repeated_draws(beta):
    # 200 repeats of 40 samples (~4 modes each, unequal sizes and cutoffs).  Each interval is held to a
    # window around its expected long-run coverage, ± ~2.5–3 binomial sd (sd = √(p(1−p)/200)):
    # profile likelihood, nominal 0.95 by Wilks' theorem (from memory), sd 1.5 %: 0.90–0.99;
    # percentile bootstrap over 40 samples, which under-covers with few resampling units (Efron &
    # Tibshirani 1993, from memory; measured here 0.915–0.944 over 1000 repeats, docs/tail-fit.md),
    # taken as 0.92, sd 1.9 %: 0.87–0.97.
    rng = np.random.default_rng(100 + int(beta))
    prefactor, repeats = prefactor_for(beta, 4), 200
    hits = np.zeros((2, 3))
    for repeat in range(repeats):
        freqs, dofs, cuts = draw(rng, beta, prefactor, 40)
        fit = fit_tail(freqs, dofs, cuts, fixed_exponent=beta, n_boot=400, seed=repeat)
        for k, (estimate, truth) in enumerate([(fit.exponent, beta), (fit.prefactor, prefactor),
                                               (fit.fixed_prefactor, prefactor)]):
            hits[0, k] += estimate.profile[0] <= truth <= estimate.profile[1]
            hits[1, k] += estimate.bootstrap[0] <= truth <= estimate.bootstrap[1]
    profile, bootstrap = hits / repeats
    assert np.all((profile >= 0.90) & (profile <= 0.99)), profile
    assert np.all((bootstrap >= 0.87) & (bootstrap <= 0.97)), bootstrap


def test_minimum_survival_matches_simulated_minima():
    # void probability of a Poisson process: P(no mode in (f_lo, x]) = exp(−∫ intensity) (from memory)
    rng = np.random.default_rng(21)
    beta, prefactor, f_lo = 4.0, prefactor_for(4.0, 3), 0.02
    freqs, dofs, _ = draw(rng, beta, prefactor, 4000, f_lo)
    lowest = np.array([f.min() if len(f) else np.inf for f in freqs])
    for x in (0.15, 0.22, 0.28, 0.33):
        predicted = minimum_survival(x, dofs, beta, prefactor, f_lo).mean()
        observed = np.mean(lowest > x)
        assert abs(observed - predicted) < 4 * np.sqrt(predicted * (1 - predicted) / len(lowest))


def test_lowest_mode_check_accepts_the_true_tail_and_rejects_a_wrong_one():
    rng = np.random.default_rng(22)
    freqs, dofs, cuts = draw(rng, 4.0, prefactor_for(4.0, 6), 300)
    fit = fit_tail(freqs, dofs, cuts, n_boot=0)
    assert fit.lowest.n_tested == sum(len(f) > 0 for f in freqs)
    assert fit.lowest.ks_pvalue > 0.01  # KS test (scipy.stats); approximate, parameters fitted
    assert np.max(np.abs(fit.lowest.predicted - fit.lowest.observed)) < 0.1
    # the same modes against the best tail with β held at 2 (matching the total count) must fail
    wrong = fit_prefactor(freqs, dofs, cuts, exponent=2.0, n_boot=0).value
    assert check_lowest_modes(select_tail(freqs, dofs, cuts), 2.0, wrong).ks_pvalue < 1e-4


def test_frequency_unit_change_keeps_beta_and_rescales_prefactor():
    # f' = k f: β is unchanged and A' = A k^−(β+1) (change of variables; derivation here)
    rng = np.random.default_rng(23)
    freqs, dofs, cuts = draw(rng, 3.0, prefactor_for(3.0, 10), 6)
    k = 2 * np.pi
    fit = fit_tail(freqs, dofs, cuts, n_boot=200)
    scaled = fit_tail([k * f for f in freqs], dofs, k * cuts, n_boot=200)
    assert scaled.exponent.value == pytest.approx(fit.exponent.value, rel=1e-10)
    assert scaled.exponent.bootstrap == pytest.approx(fit.exponent.bootstrap, rel=1e-9)
    factor = k ** -(fit.exponent.value + 1)
    assert scaled.prefactor.value == pytest.approx(fit.prefactor.value * factor, rel=1e-8)
    assert scaled.fixed_prefactor.profile == pytest.approx(np.multiply(fit.fixed_prefactor.profile, k**-5),
                                                           rel=1e-9)


def test_bootstrap_only_from_two_samples_and_flagged_below_the_threshold():
    rng = np.random.default_rng(24)
    freqs, dofs, cuts = draw(rng, 4.0, prefactor_for(4.0, 20), 5)
    one = fit_tail(freqs[:1], dofs[0], cuts[0], n_boot=500)
    assert one.exponent.bootstrap is None and one.fixed_prefactor.bootstrap is None
    assert not one.bootstrap_reliable and one.exponent.profile[0] < one.exponent.value
    few = fit_tail(freqs, dofs, cuts, n_boot=500, seed=7)
    assert few.exponent.bootstrap is not None and not few.bootstrap_reliable and 5 < FEW_SAMPLES
    assert any(f"< {FEW_SAMPLES}" in note for note in few.notes)
    again = fit_tail(freqs, dofs, cuts, n_boot=500, seed=7)
    other = fit_tail(freqs, dofs, cuts, n_boot=500, seed=8)
    assert again.exponent.bootstrap == few.exponent.bootstrap != other.exponent.bootstrap
    alone = fit_prefactor(freqs, dofs, cuts, exponent=4.0, n_boot=500, seed=7)
    assert alone == few.fixed_prefactor


def test_result_is_json_ready():
    rng = np.random.default_rng(25)
    freqs, dofs, cuts = draw(rng, 4.0, prefactor_for(4.0, 10), 4)
    fit = fit_tail(freqs, dofs, cuts, 0.01, n_boot=200, unit="THz")
    back = json.loads(json.dumps(fit.to_dict(), allow_nan=False))
    assert back["exponent"]["value"] == fit.exponent.value
    assert back["fixed_prefactor"]["profile"] == list(fit.fixed_prefactor.profile)
    assert back["n_samples"] == 4 and back["n_modes"] == sum(fit.modes_per_sample)
    assert back["cutoffs"] == cuts.tolist() and back["unit"] == "THz" and back["f_lo"] == 0.01
    assert set(back["methods"]) == {"fit", "profile", "bootstrap", "lowest"}
    assert len(back["lowest"]["grid"]) == len(back["lowest"]["predicted"])


def test_modes_outside_the_range_are_left_out():
    f = np.array([-0.01, 0.0, 0.0, 0.05, 0.1, 0.2, 0.25, 0.3, 0.31, 0.5, 0.9])
    data = select_tail([f], 300, 0.4, f_lo=0.05)
    assert data.frequencies[0].tolist() == [0.1, 0.2, 0.25, 0.3, 0.31]


@pytest.mark.parametrize("args, message", [
    (([np.array([0.1, 0.2, 0.3])], 300, 0.4), "only 3 modes lie in (0, f_c] with cutoffs f_c = 0.4 over 1 samples; at least 5"),
    (([np.array([0.0, 0.1, 0.2, 0.3, 0.35, 0.38])], 300, 0.4), "1 frequencies ≤ 0"),
    (([np.array([-0.1, 0.1, 0.2, 0.3, 0.35, 0.38])], 300, 0.4), "1 frequencies ≤ 0"),
    (([np.array([0.1, np.nan, 0.2])], 300, 0.4), "NaN or infinite"),
    (([np.linspace(0.1, 0.3, 8)], 300, 0.4, 0.4), "cutoff 0.4 is not above f_lo = 0.4"),
    (([np.linspace(0.1, 0.3, 8)] * 2, [300], 0.4), "n_dof needs 2 finite values"),
    (([np.linspace(0.1, 0.3, 8)], 300.5, 0.4), "positive integers"),
    (([np.linspace(0.1, 0.3, 8)], 300, 0.4, -0.1), "f_lo must be finite and ≥ 0"),
    (([], 300, 0.4), "no samples"),
    (([np.full(8, 0.3999)], 300, 0.4), "edge of β"),
])
def test_bad_input_is_refused(args, message):
    with pytest.raises(InputError) as caught:
        fit_tail(*args, n_boot=0)
    assert message in str(caught.value)


def test_fewest_modes_boundary():
    f = np.linspace(0.1, 0.35, MIN_TAIL_MODES)
    assert fit_tail([f], 300, 0.4, n_boot=0).n_modes == MIN_TAIL_MODES
    with pytest.raises(InputError, match=f"only {MIN_TAIL_MODES - 1} modes"):
        fit_tail([f[1:]], 300, 0.4, n_boot=0)


@pytest.mark.parametrize("options, message", [({"confidence": 1.0}, "confidence"),
                                              ({"n_boot": 10}, "n_boot")])
def test_bad_options_are_refused(options, message):
    with pytest.raises(InputError, match=message):
        fit_tail([np.linspace(0.1, 0.3, 8)] * 2, 300, 0.4, **options)
