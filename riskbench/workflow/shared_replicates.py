"""The paired comparison's bootstrap replicates, measured by the validation stage from its own refits and read
by the comparison stage, so that no bootstrap refit is made twice.

The bootstrap optimism (stage 3) and the paired comparison (stage 4) draw replicate i from seed i of the run's
seed and refit the same models on it: the refits are the same. Stage 3 therefore also measures the comparison's
out-of-bag replicates (:func:`riskbench.validation.optimism.bootstrap_optimism_result`, ``paired``) and saves
them as ``data/paired_replicates_models.parquet``, ``data/paired_replicates_pairs.parquet`` and
``data/paired_replicates.json`` (per replicate: its error, if any, and the refits' warnings; and the key below).
Stage 4 uses them only when the key it computes is the saved one: the same seed, number of resamples, the
two specs with every setting, the horizons and the SHA-256 of the landmark stack. Anything else (an older run,
a changed configuration, a damaged file) makes stage 4 compute the replicates itself, as it did before;
replicates stage 3 could not decide (a refit of another model failed) are computed by stage 4 as well.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from riskbench.models.fit_warnings import FitWarning
from riskbench.report.outputs import DATA, atomic_write_text, load_data, output_path, save_data
from riskbench.validation.comparison import ReplicateLog
from riskbench.validation.model_specs import ModelSpec
from riskbench.validation.paired import Evaluation

#: Stem of the three files (``_models`` and ``_pairs`` Parquet, and the JSON index).
STEM = "paired_replicates"


def replicate_key(plan: Evaluation, seed: int, n_boot: int, stack_sha256: str) -> dict[str, Any]:
    """What must be equal for saved replicates to be the ones stage 4 would compute (module notes)."""
    return {
        "seed": int(seed),
        "n_boot": int(n_boot),
        "specs": [_spec_text(s) for s in plan.specs],
        "horizons_days": [float(h) for h in plan.horizons],
        "pairs": [list(p) for p in plan.pairs],
        "thresholds": [float(t) for t in plan.thresholds],
        "nri_categories": None if plan.nri_categories is None else [float(c) for c in plan.nri_categories],
        "landmark_stack_sha256": stack_sha256,
    }


def _spec_text(spec: ModelSpec) -> str:
    return repr(spec)  # a frozen dataclass: name, covariates, family, every parameter and the missing-data plan


def save_replicates(run_dir: str | Path, key: Mapping[str, Any], replicates: Mapping[int, tuple]) -> None:
    """Write the replicates (``index -> (index, per_spec, per_pair, error, log)``) and their key."""
    ok = [replicates[i] for i in sorted(replicates)]
    per_spec = [r[1] for r in ok if r[1] is not None]
    per_pair = [r[2] for r in ok if r[2] is not None]
    save_data(pd.concat(per_spec, ignore_index=True) if per_spec else pd.DataFrame(), run_dir, f"{STEM}_models")
    save_data(pd.concat(per_pair, ignore_index=True) if per_pair else pd.DataFrame(), run_dir, f"{STEM}_pairs")
    index = {
        "key": dict(key),
        "replicates": {
            str(r[0]): {
                "error": r[3],
                "failed_spec": None if r[4] is None else r[4].failed_spec,
                "fits": [] if r[4] is None else [[spec, [_warning_list(w) for w in ws]] for spec, ws in r[4].fits],
            }
            for r in ok
        },
    }
    atomic_write_text(output_path(run_dir, DATA, STEM, ".json"), json.dumps(index, indent=1))


def _warning_list(w: FitWarning) -> list[Any]:
    return [w.kind, list(w.terms), w.text]


def load_replicates(run_dir: str | Path, key: Mapping[str, Any]) -> dict[int, tuple]:
    """The saved replicates when their key is ``key`` (module notes); otherwise none."""
    path = output_path(run_dir, DATA, STEM, ".json")
    try:
        index = json.loads(path.read_text(encoding="utf-8"))
        if index.get("key") != json.loads(json.dumps(dict(key))):
            return {}
        per_spec = load_data(run_dir, f"{STEM}_models")
        per_pair = load_data(run_dir, f"{STEM}_pairs")
        return {int(i): _replicate(int(i), entry, per_spec, per_pair) for i, entry in index["replicates"].items()}
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return {}  # no file, an older or damaged one: stage 4 computes the replicates itself


def _replicate(i: int, entry: Mapping[str, Any], per_spec: pd.DataFrame, per_pair: pd.DataFrame) -> tuple:
    fits = [
        (str(spec), [FitWarning(str(k), tuple(str(t) for t in terms), str(text)) for k, terms, text in ws])
        for spec, ws in entry["fits"]
    ]
    log = ReplicateLog(fits=fits, failed_spec=entry["failed_spec"])
    if entry["error"] is not None:
        return i, None, None, str(entry["error"]), log
    return i, _rows(per_spec, i), _rows(per_pair, i), None, log


def _rows(frame: pd.DataFrame, i: int) -> pd.DataFrame | None:
    if "replicate" not in frame.columns:
        return None
    rows = frame.loc[frame["replicate"].to_numpy() == i].reset_index(drop=True)
    if not len(rows):
        raise ValueError(f"replicate {i} has no rows")
    return rows


def forget_replicates(run_dir: str | Path) -> None:
    """Remove saved replicates (stage 3 starts afresh; stage 4 then uses only what this run of stage 3 saves)."""
    for name, suffix in ((f"{STEM}_models", ".parquet"), (f"{STEM}_pairs", ".parquet"), (STEM, ".json")):
        output_path(run_dir, DATA, name, suffix).unlink(missing_ok=True)
