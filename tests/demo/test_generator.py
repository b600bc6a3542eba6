"""Shape, contract and determinism of the generated tables, and the parameter checks."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench.demo import COVARIATES, DemoParameterError, GeneratorParameters, generate_cohort
from riskbench.demo.process import next_exam_day, planned_exam_interval


@pytest.fixture(scope="module")
def small():
    return generate_cohort(400, seed=12, n_risk_paths=5)


def _days(cohort, frame):
    entry = pd.to_datetime(cohort.patients.set_index("patient_id")["entry_date"])
    return (pd.to_datetime(frame["date"]) - entry.loc[frame["patient_id"]].to_numpy()).dt.days.to_numpy()


def test_tables_follow_the_input_contract(small):
    p, m, o = small.patients, small.measurements, small.outcomes
    assert list(p.columns) == ["patient_id", "entry_date", "birth_date", "sex", "pack_years"]
    assert list(m.columns) == ["patient_id", "date", "variable", "value", "unit", "source"]
    assert list(o.columns) == ["patient_id", "date", "kind", "detail"]
    assert p["patient_id"].is_unique and p["patient_id"].str.fullmatch(r"P\d{6}").all()
    assert set(p["sex"]) == {"F", "M"}
    units = m.groupby("variable")["unit"].unique().map(list).to_dict()
    assert units == {"nodule_volume": ["mm3"], "serum_marker": ["ng/mL"], "suspicion_score": ["1"]}
    score = m.loc[m["variable"] == "suspicion_score", "value"]
    assert score.between(0, 1).all()
    assert (m.loc[m["variable"] != "suspicion_score", "value"] > 0).all()
    # one terminal row per patient, kinds from the contract
    assert o["patient_id"].is_unique and set(o["kind"]) <= {"outcome", "competing", "end_of_follow_up"}
    # each CT exam gives a volume and a score on the same date
    exams = m[m["source"] == "imaging"].groupby(["patient_id", "date"])["variable"].agg(lambda v: tuple(sorted(v)))
    assert exams.map(lambda v: v == ("nodule_volume", "suspicion_score")).all() and len(exams) > 400


def test_records_start_at_entry_and_stop_at_the_end_of_follow_up(small):
    m, o = small.measurements, small.outcomes.set_index("patient_id")
    day = _days(small, m)
    end = _days(small, o.reset_index())
    end_of = pd.Series(end, index=o.index).loc[m["patient_id"]].to_numpy()
    assert day.min() == 0
    first = m.assign(day=day).groupby(["patient_id", "variable"])["day"].min()
    assert (first == 0).all()  # a baseline exam and lab for everyone
    on_end_day = day == end_of
    assert (day <= end_of).all()
    discharged = o.loc[m["patient_id"], "detail"].to_numpy() == "discharged from surveillance"
    assert not (on_end_day & ~discharged).any()  # only the discharging exam is dated on the end day
    assert (end > 0).all()


def test_visit_schedule_is_size_dependent_with_gaps_inside_the_protocol(small):
    """Intervals after an exam lie in [planned (1 - jitter), 2 planned (1 + jitter)] (one missed visit)."""
    m = small.measurements
    vol = m[m["variable"] == "nodule_volume"].assign(day=lambda d: _days(small, d))
    vol["gap"] = vol.groupby("patient_id")["day"].shift(-1) - vol["day"]
    vol = vol.dropna(subset=["gap"])
    planned = planned_exam_interval(vol["value"].to_numpy(), GeneratorParameters())
    assert (vol["gap"] >= np.floor(planned * 0.9)).all() and (vol["gap"] <= np.ceil(planned * 2.2)).all()
    large = vol["value"] >= 300
    assert vol.loc[large, "gap"].median() < vol.loc[~large & (vol["value"] < 100), "gap"].median()


@settings(max_examples=50, deadline=None)
@given(volume=st.floats(1, 1e5), seed=st.integers(0, 2**32 - 1), day=st.integers(0, 3000))
def test_next_exam_is_one_or_two_jittered_intervals_later(volume, seed, day):
    p = GeneratorParameters()
    nxt = next_exam_day(np.array([float(day)]), np.array([volume]), p, np.random.default_rng(seed))[0]
    planned = planned_exam_interval(np.array([volume]), p)[0]
    gap = nxt - day
    assert gap == np.rint(gap)
    assert np.floor(planned * (1 - p.exam_jitter)) <= gap <= np.ceil(2 * planned * (1 + p.exam_jitter))


def test_true_intervals_are_contiguous_and_end_with_the_recorded_status(small):
    iv = small.truth.intervals
    assert list(iv.columns) == ["patient_id", "start", "stop", "status", *COVARIATES]
    assert (iv["start"] < iv["stop"]).all()
    g = iv.groupby("patient_id", sort=False)
    assert (g["start"].first() == 0).all()
    nxt = g["start"].shift(-1)
    assert (nxt.dropna() == iv.loc[nxt.notna(), "stop"]).all()
    last = g.tail(1).set_index("patient_id")
    o = small.outcomes.set_index("patient_id")
    end = pd.Series(_days(small, small.outcomes), index=o.index)
    assert (last["stop"] == end.loc[last.index]).all()
    expected = o.loc[last.index, "kind"].map({"outcome": 1, "competing": 2, "end_of_follow_up": 0})
    assert (last["status"] == expected).all()
    assert (iv.loc[iv.duplicated("patient_id", keep="last"), "status"] == 0).all()


def test_true_covariates_are_the_last_values_known_at_start(small):
    """A slow, obviously correct re-derivation for 25 patients from the written tables."""
    m = small.measurements.assign(day=lambda d: _days(small, d))
    p = small.patients.set_index("patient_id")
    iv = small.truth.intervals
    for pid in p.index[:25]:
        mp = m[m["patient_id"] == pid]
        vol = mp[mp["variable"] == "nodule_volume"]
        for row in iv[iv["patient_id"] == pid].itertuples():
            known = mp[mp["day"] <= row.start]
            last = {v: known.loc[known["variable"] == v, "value"].iloc[-1] for v in known["variable"].unique()}
            assert row.log_nodule_volume == pytest.approx(np.log(last["nodule_volume"]), abs=1e-12)
            assert row.log_nodule_volume_change == pytest.approx(
                np.log(last["nodule_volume"]) - np.log(vol["value"].iloc[0]), abs=1e-12
            )
            assert row.suspicion_score == last["suspicion_score"]
            assert row.serum_marker == last["serum_marker"]
            age = (pd.Timestamp(p.loc[pid, "entry_date"]) - pd.Timestamp(p.loc[pid, "birth_date"])).days / 365.25
            assert row.age_at_entry == pytest.approx(age, abs=1e-12)
            assert row.pack_years == p.loc[pid, "pack_years"]


def test_same_seed_same_cohort_and_different_seed_different_cohort():
    a = generate_cohort(150, seed=4, n_risk_paths=3)
    b = generate_cohort(150, seed=4, n_risk_paths=3)
    c = generate_cohort(150, seed=5, n_risk_paths=3)
    for name in ("patients", "measurements", "outcomes"):
        pd.testing.assert_frame_equal(getattr(a, name), getattr(b, name))
    pd.testing.assert_frame_equal(a.truth.intervals, b.truth.intervals)
    pd.testing.assert_frame_equal(a.truth.true_risk, b.truth.true_risk)
    assert not a.measurements.equals(c.measurements)
    ma = generate_cohort(250, seed=4, variant="messy", n_risk_paths=0)
    mb = generate_cohort(250, seed=4, variant="messy", n_risk_paths=0)
    pd.testing.assert_frame_equal(ma.measurements, mb.measurements)
    assert ma.defects == mb.defects


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        ({"n_patients": -1}, "n_patients"),
        ({"n_patients": 2.5}, "n_patients"),
        ({"seed": -3}, "seed"),
        ({"variant": "dirty"}, "variant"),
        ({"horizon_days": 0}, "horizon_days"),
        ({"horizon_days": -30.0}, "horizon_days"),
        ({"landmarks_days": [0, -1]}, "landmarks_days"),
        ({"n_risk_paths": -2}, "n_risk_paths"),
        ({"n_patients": 50, "variant": "messy"}, "n_patients"),
    ],
)
def test_bad_parameters_get_a_one_line_message_naming_the_parameter(kwargs, name):
    args = {"n_patients": 10, "seed": 0, **kwargs}
    with pytest.raises(DemoParameterError) as err:
        generate_cohort(**args)
    message = str(err.value)
    assert message.startswith(name) and "\n" not in message
    assert isinstance(err.value, ValueError)


def test_generator_parameters_reject_unknown_coefficients():
    with pytest.raises(ValueError, match="coefficients"):
        GeneratorParameters(coefficients={"tumour_size": 1.0})


@pytest.mark.parametrize(("volume", "after"), [(50.0, 0.0), (50.0, 380.0), (50.0, 520.0), (500.0, 120.0)])
def test_conditional_next_exam_matches_rejection_sampling(volume, after):
    """The oracle's exact conditional draw of the next exam (given none up to ``after``) has the law of
    the protocol draw restricted to days > ``after`` (two-sample Kolmogorov-Smirnov test, 20,000 each,
    p > 0.001)."""
    from scipy.stats import ks_2samp

    from riskbench.demo.process import exam_interval_bounds, next_visit_after

    p = GeneratorParameters()
    rng = np.random.default_rng(17)
    raw = next_exam_day(np.zeros(400_000), np.full(400_000, volume), p, rng)
    reference = raw[raw > after][:20_000]
    assert reference.size == 20_000
    lo, hi = exam_interval_bounds(np.full(20_000, volume), p)
    ours = next_visit_after(
        np.zeros(20_000),
        lo,
        hi,
        p.exam_miss_probability,
        p.min_gap_days,
        np.full(20_000, after),
        np.random.default_rng(18),
    )
    assert (ours > after).all()
    assert ks_2samp(ours, reference).pvalue > 0.001


@pytest.mark.parametrize("after", [150.0, 250.0])
def test_conditional_next_lab_matches_rejection_sampling(after):
    """As above for the lab schedule (additive jitter; beyond 228 days only a missed draw remains)."""
    from scipy.stats import ks_2samp

    from riskbench.demo.process import lab_interval_bounds, next_lab_day, next_visit_after

    p = GeneratorParameters()
    raw = next_lab_day(np.zeros(400_000), p, np.random.default_rng(5))
    reference = raw[raw > after][:20_000]
    assert reference.size == 20_000
    ours = next_visit_after(
        np.zeros(20_000),
        *lab_interval_bounds(20_000, p),
        p.lab_miss_probability,
        p.min_gap_days,
        np.full(20_000, after),
        np.random.default_rng(6),
    )
    assert (ours > after).all()
    assert ks_2samp(ours, reference).pvalue > 0.001
