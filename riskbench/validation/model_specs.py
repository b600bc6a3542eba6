"""Model specifications: a named covariate set with a model family, and fitting one on tables."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from riskbench.models.family_registry import canonical_family
from riskbench.models.missing_data import MissingDataPlan
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.sources import ValidationTables

FAMILIES: tuple[str, ...] = (
    "landmark_cox",
    "time_varying_cox",
    "forest",
    "shared_trajectory_joint",
)  # "cox": old name, accepted
#: Families fitted on the counting-process table.
COUNTING_PROCESS_FAMILIES: tuple[str, ...] = ("time_varying_cox", "shared_trajectory_joint")


@dataclass(frozen=True)
class ModelSpec:
    """A model to validate: a name, its covariates and a model family.

    Attributes
    ----------
    name : str
        Label used in every result table (e.g. ``"clinical"``, ``"imaging + clinical"``).
    covariates : tuple of str
        Covariate column names (cohort-stage names, e.g. ``log_nodule_volume``).
    family : {"landmark_cox", "time_varying_cox", "forest"}  (the old name "cox" is read as "time_varying_cox")
        ``landmark_cox``: :class:`riskbench.models.LandmarkSupermodel` on the landmark stack;
        ``cox``: :class:`riskbench.models.CoxModel` on the counting-process table;
        ``forest``: :class:`riskbench.models.SurvivalForest` on the landmark stack.
    params : mapping
        Extra keyword arguments of the model's constructor. For ``forest``, ``random_state`` is set
        per replicate from the replicate's seed unless given here.
    missing : MissingDataPlan, str or None
        How missing covariate values are handled (:mod:`riskbench.models.missing_data`): a plan, a method
        name (``"multiple_imputation"``, ``"complete_cases"``, ``"missing_indicator"``; default settings), or
        None for none (a missing value is then an error naming the configuration keys that choose a method).
        The workflow always passes the configured plan (default multiple imputation). Every fit -- per
        fold, per bootstrap replicate -- fits its own imputation models on its own training rows.
    """

    name: str
    covariates: tuple[str, ...]
    family: str = "landmark_cox"
    params: Mapping[str, Any] = field(default_factory=dict)
    missing: MissingDataPlan | str | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name:
            raise ValidationInputError("a ModelSpec needs a non-empty name.")
        covs = (self.covariates,) if isinstance(self.covariates, str) else tuple(self.covariates)
        if not covs or not all(isinstance(c, str) and c for c in covs):
            raise ValidationInputError(
                f"ModelSpec '{self.name}': covariates must be non-empty column names; got {self.covariates!r}."
            )
        if len(set(covs)) != len(covs):
            raise ValidationInputError(f"ModelSpec '{self.name}': covariates repeat a name: {list(covs)}.")
        object.__setattr__(self, "family", canonical_family(self.family))
        if self.family not in FAMILIES:
            raise ValidationInputError(
                f"ModelSpec '{self.name}': family must be one of {FAMILIES}; got {self.family!r}."
            )
        object.__setattr__(self, "covariates", covs)
        object.__setattr__(self, "params", dict(self.params))
        try:
            object.__setattr__(self, "missing", MissingDataPlan.coerce(self.missing))
        except ValueError as exc:
            raise ValidationInputError(f"ModelSpec '{self.name}': {exc}") from None

    def without(self, group: Sequence[str], *, name: str | None = None) -> ModelSpec:
        """This spec with the covariates of ``group`` removed (for leave-one-group-out refits)."""
        absent = [c for c in group if c not in self.covariates]
        if absent:
            raise ValidationInputError(f"ModelSpec '{self.name}' has no covariate(s) {absent} to remove.")
        kept = tuple(c for c in self.covariates if c not in set(group))
        if not kept:
            raise ValidationInputError(f"removing {list(group)} leaves ModelSpec '{self.name}' without covariates.")
        return ModelSpec(
            name or f"{self.name} without {', '.join(group)}", kept, self.family, self.params, self.missing
        )


def build_estimator(spec: ModelSpec, *, seed: int | None = None) -> Any:
    """An unfitted estimator for ``spec`` (``seed`` feeds the forest's ``random_state`` and the imputations).

    With a missing-data plan the model is wrapped in :class:`riskbench.models.missing_data.MissingDataModel`.
    """
    from riskbench import models
    from riskbench.models.missing_data import MissingDataModel

    params = dict(spec.params)
    if spec.family == "landmark_cox":
        estimator = models.LandmarkSupermodel(spec.covariates, **params)
    elif spec.family == "time_varying_cox":
        # a patient's rows are not independent: robust standard errors unless configured otherwise
        params.setdefault("variance", "model" if params.get("cluster", "patient_id") is None else "robust")
        estimator = models.CoxModel(spec.covariates, **params)
    elif spec.family == "shared_trajectory_joint":
        if seed is not None:
            params.setdefault("random_state", seed)
        # missing marker values are simply no measurement: the joint model needs no missing-data wrapper
        from riskbench.models.joint_family import SharedTrajectoryModel

        return SharedTrajectoryModel(spec.covariates, **params)
    else:
        if seed is not None:
            params.setdefault("random_state", seed)
        estimator = models.SurvivalForest(spec.covariates, **params)
    plan = MissingDataPlan.coerce(spec.missing)  # a plan already (ModelSpec coerces it); typed for the checker
    if plan is None:
        return estimator
    return MissingDataModel(
        estimator,
        method=plan.method,
        imputations=plan.imputations,
        max_iterations=plan.max_iterations,
        random_state=0 if seed is None else int(seed),
    )


def fit_spec(spec: ModelSpec, tables: ValidationTables, *, seed: int | None = None, start: Any = None) -> Any:
    """Fit ``spec`` on the tables of one set of patients.

    Parameters
    ----------
    spec : ModelSpec
    tables : ValidationTables
        The ``cox`` family fits on ``tables.counting_process``; the others on ``tables.landmark_stack``.
    seed : int, optional
        Seed for random model families (forest).
    start : object, optional
        :func:`starting_values` of a fit of the same spec on the whole cohort, making this a resampling refit
        of it: a landmark super-model then starts Newton–Raphson from those estimates (the same optimum to the
        convergence tolerance, in fewer iterations) and skips the patient-clustered covariance, which no
        replicate uses. Ignored by the other families.

    Returns
    -------
    object
        The fitted model (has ``predict_risk(table, horizon)``).
    """
    estimator = build_estimator(spec, seed=seed)
    if start is not None and spec.family == "landmark_cox":
        return estimator.fit(tables.landmark_stack, start=start, robust=False)
    if spec.family in COUNTING_PROCESS_FAMILIES:
        if tables.counting_process is None:
            raise ValidationInputError(
                f"ModelSpec '{spec.name}' (family '{spec.family}') fits on the counting-process table, but the table "
                "source has none; build the source with the counting-process table."
            )
        return estimator.fit(tables.counting_process)
    return estimator.fit(tables.landmark_stack)


def starting_values(model: Any) -> Any:
    """Where a resampling refit of ``model``'s spec starts (``fit_spec(start=...)``); None when its family has
    no such start."""
    values = getattr(model, "starting_values", None)
    return values() if callable(values) else None


def prediction_columns(spec: ModelSpec, table_columns: Sequence[str]) -> list[str]:
    """Columns a fitted model of ``spec`` can read when predicting a row.

    The covariates, the prediction origin (``landmark`` / ``start``) and any column a parameter names
    (e.g. ``strata="sex_male"``). Rows equal on these columns get equal predictions (the prediction
    contract is row-wise), which lets resampling predict each distinct row once.
    """
    present = set(table_columns)
    named = [v for v in spec.params.values() if isinstance(v, str) and v in present]
    if spec.family == "shared_trajectory_joint":  # its prediction reads the patient's own measurement history
        named += [c for c in ("patient_id",) if c in present]
        named += [c for c in present if c.endswith("_staleness_days") or c.endswith("_change")]
    columns = [*spec.covariates, *[c for c in ("landmark", "start") if c in present], *named]
    return list(dict.fromkeys(columns))
