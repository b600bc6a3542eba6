"""NRI and IDI at a horizon, checked against their published definitions.

Sources: Pencina, D'Agostino Sr, D'Agostino Jr & Vasan (2008), Stat Med 27:157-172 (binary NRI and IDI as
proportions / differences of mean risks); Pencina, D'Agostino Sr & Steyerberg (2011), Stat Med 30:11-21
(survival NRI with Kaplan-Meier event probabilities). The Kaplan-Meier curves in the censored check come from
lifelines, an implementation independent of ours.
"""

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.reclassification import integrated_discrimination, net_reclassification


def _uncensored(seed=0, n=400):
    rng = np.random.default_rng(seed)
    marker = rng.normal(size=n)
    old = 1 / (1 + np.exp(-(-1.5 + 0.5 * rng.normal(size=n))))
    new = np.clip(old + 0.1 * marker, 0.001, 0.999)
    event = (rng.uniform(size=n) < new).astype(int)
    # Events happen before the horizon, non-events are followed past it: no censoring before 365 days.
    time = np.where(event == 1, rng.uniform(1, 365, n), 400.0)
    return time, event, old, new


def test_category_free_nri_without_censoring_equals_pencina_2008_proportions():
    time, event, old, new = _uncensored()
    res = net_reclassification(time, event, old, new, 365.0)
    up, down = new > old, new < old
    ev, ne = event == 1, event == 0
    expected_events = up[ev].mean() - down[ev].mean()  # Pencina et al. 2008, NRI event part
    expected_nonevents = down[ne].mean() - up[ne].mean()
    assert res.events == pytest.approx(expected_events, abs=1e-12)
    assert res.nonevents == pytest.approx(expected_nonevents, abs=1e-12)
    assert res.total == pytest.approx(expected_events + expected_nonevents, abs=1e-12)


def test_categorical_nri_uses_category_moves_only():
    time, event, old, new = _uncensored(seed=1)
    cuts = (0.1, 0.2)
    res = net_reclassification(time, event, old, new, 365.0, categories=cuts)
    cat_old, cat_new = np.digitize(old, cuts), np.digitize(new, cuts)
    up, down = cat_new > cat_old, cat_new < cat_old
    ev, ne = event == 1, event == 0
    assert res.events == pytest.approx(up[ev].mean() - down[ev].mean(), abs=1e-12)
    assert res.nonevents == pytest.approx(down[ne].mean() - up[ne].mean(), abs=1e-12)
    assert res.n_up == up.sum() and res.n_down == down.sum()


def test_survival_nri_with_censoring_follows_pencina_2011_with_independent_km():
    rng = np.random.default_rng(5)
    n = 600
    old = rng.uniform(0.05, 0.5, n)
    new = np.clip(old + rng.normal(0, 0.08, n), 0.01, 0.99)
    t_event = rng.exponential(1000 / (new * 5), n)
    t_cens = rng.uniform(50, 900, n)
    time = np.minimum(t_event, t_cens)
    event = (t_event <= t_cens).astype(int)
    h = 365.0
    res = net_reclassification(time, event, old, new, h)

    def p_event(mask):
        km = KaplanMeierFitter().fit(time[mask], event[mask])
        return 1 - float(km.survival_function_at_times(h).iloc[0])

    up, down = new > old, new < old
    p, p_up, p_down = p_event(np.ones(n, bool)), p_event(up), p_event(down)
    e_part = (p_up * up.sum() - p_down * down.sum()) / (n * p)  # Pencina et al. 2011, section 4
    ne_part = ((1 - p_down) * down.sum() - (1 - p_up) * up.sum()) / (n * (1 - p))
    assert res.events == pytest.approx(e_part, abs=1e-10)
    assert res.nonevents == pytest.approx(ne_part, abs=1e-10)
    assert res.event_probability == pytest.approx(p, abs=1e-12)


def test_idi_without_censoring_is_difference_of_discrimination_slopes():
    time, event, old, new = _uncensored(seed=2)
    res = integrated_discrimination(time, event, old, new, 365.0)
    ev, ne = event == 1, event == 0
    slope_old = old[ev].mean() - old[ne].mean()  # Pencina et al. 2008, IDI = difference of slopes
    slope_new = new[ev].mean() - new[ne].mean()
    assert res.slope_old == pytest.approx(slope_old, abs=1e-12)
    assert res.slope_new == pytest.approx(slope_new, abs=1e-12)
    assert res.total == pytest.approx(slope_new - slope_old, abs=1e-12)
    assert res.events == pytest.approx((new - old)[ev].mean(), abs=1e-12)


def test_idi_weights_undo_censoring_on_average():
    """With random censoring, the IPCW IDI lands near the IDI of the same patients without censoring."""
    rng = np.random.default_rng(9)
    n = 20000
    old = rng.uniform(0.05, 0.6, n)
    new = np.clip(old + 0.15 * (rng.uniform(size=n) - 0.5), 0.01, 0.99)
    t_event = rng.exponential(365 / -np.log(1 - new))  # P(T <= 365) = new
    full = integrated_discrimination(t_event, np.ones(n, int), old, new, 365.0)
    t_cens = rng.uniform(0, 2000, n)
    time = np.minimum(t_event, t_cens)
    event = (t_event <= t_cens).astype(int)
    cens = integrated_discrimination(time, event, old, new, 365.0)
    # Sampling error of a weighted mean difference at n = 20000 is about 0.003 (common practice: 3 SE).
    assert cens.total == pytest.approx(full.total, abs=0.01)


def test_errors_name_the_problem():
    with pytest.raises(ValidationInputError, match="event must be 0/1"):
        net_reclassification([1, 2], [0, 2], [0.1, 0.2], [0.2, 0.1], 10)
    with pytest.raises(ValidationInputError, match="both events and non-events"):
        net_reclassification([1, 2], [0, 0], [0.1, 0.2], [0.2, 0.1], 10)
    with pytest.raises(ValidationInputError, match="categories"):
        net_reclassification([1, 20], [1, 0], [0.1, 0.2], [0.2, 0.1], 10, categories=(0.5, 0.2))
