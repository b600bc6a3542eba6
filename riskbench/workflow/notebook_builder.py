"""Write the four stage notebooks (``notebooks/0N_<stage>.ipynb``) with nbformat.

The notebooks are thin on purpose: a parameters cell (tagged ``parameters`` for papermill) and calls into
:mod:`riskbench.workflow.stages`, which does the stage's work and writes its Parquet files, tables and
figures into the run folder. No statistics live in a notebook. The committed notebooks are this module's
output; a test keeps them in step.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

STAGE_NOTEBOOKS: tuple[tuple[str, str], ...] = (
    ("cohort", "01_cohort.ipynb"),
    ("models", "02_models.ipynb"),
    ("validation", "03_validation.ipynb"),
    ("comparison", "04_comparison.ipynb"),
)

_CAUTION = (
    "> Research software, not a medical device. Results are not for clinical decisions without proper "
    "validation; follow local ethics approval, data-protection rules and clinical governance."
)

_PARAMETERS = '''# Parameters (papermill replaces this cell's values when it runs the analysis).
# By hand (make lab): run the notebooks in order; each reads the previous stage's files in run_dir.
config_path = "../configs/demo.toml"
run_dir = "../results/lab"'''

_STAGES: dict[str, tuple[str, str, str]] = {
    "cohort": (
        "Stage 1: cohort",
        "Reads the source tables, accounts for every input row (ledger), builds the counting-process "
        "table and the landmark stack, and replaces patient identifiers by run pseudonyms. Writes "
        "`data/*.parquet` for the next stages, the cohort flow, the baseline table and example timelines.",
        "run_cohort_stage",
    ),
    "models": (
        "Stage 2: models",
        "Fits every model of the configuration on the whole cohort and writes its coefficients "
        "(hazard ratios), the hazard-ratio figure and the apparent predictions.",
        "run_models_stage",
    ),
    "validation": (
        "Stage 3: validation",
        "Patient-grouped cross-validation (out-of-fold predictions at every horizon) and bootstrap "
        "optimism of the apparent performance.",
        "run_validation_stage",
    ),
    "comparison": (
        "Stage 4: comparison and report",
        "Discrimination, calibration, net benefit and the triage operating point from the out-of-fold "
        "predictions; the paired comparison of the two model sets; the HTML report.",
        "run_comparison_stage",
    ),
}


#: Per stage, a commented cell showing how to go one step further by hand with the stage's result object
#: (:mod:`riskbench.workflow.stage_result`). Commented so that a run does not execute it.
_FURTHER: dict[str, str] = {
    "cohort": """# One step further by hand (remove the leading '# ' and run):
# result.summary                  # flow, rows used, landmarks and baseline, small counts hidden
# result.summary.plot_flow()      # the flow diagram as a matplotlib figure
# result.landmark_stack.columns   # the pseudonymised landmark stack the models are fitted on""",
    "models": """# One step further by hand (remove the leading '# ' and run):
# list(result.models)                                  # the fitted models by name
# result.model_summary("imaging_clinical")             # coefficients (or the Cox summary)
# result.models["imaging_clinical"].predict_risk(result.landmark_stack, 730.5)  # risk by 2 years""",
    "validation": """# One step further by hand (remove the leading '# ' and run):
# result.cv_predictions.head()                         # row, model, horizon (days), risk, fold
# result.risks("imaging_clinical", "2 years")          # cross-validated risks in landmark-stack row order""",
    "comparison": """# One step further by hand (remove the leading '# ' and run):
# result.concordance.plot()                            # Harrell's and Uno's C by horizon
# result.calibration("imaging_clinical", "2 years").plot()
# result.comparison                                    # candidate against reference, with intervals
#
# Later, from the finished run folder (README: "Looking closer at a finished run"):
# from riskbench.workflow.run_results import open_run
# run = open_run(run_dir)
# run.cohort
# refit = run.refit("imaging_clinical", drop=["serum_marker"])
# run.calibration(refit, "2 years").plot()""",
}


def stage_notebook(stage: str) -> nbformat.NotebookNode:
    """The notebook of one stage (``cohort``, ``models``, ``validation`` or ``comparison``)."""
    title, what, function = _STAGES[stage]
    params = new_code_cell(_PARAMETERS)
    params.metadata["tags"] = ["parameters"]
    cells = [
        new_markdown_cell(f"# {title}\n\n{what}\n\n{_CAUTION}"),
        params,
        new_code_cell(
            "from riskbench.workflow import stages\n\n"
            "config = stages.load_config(config_path)\n"
            f"result = stages.{function}(config, run_dir)"
        ),
        new_code_cell("stages.show(result)"),
        new_code_cell(_FURTHER[stage]),
    ]
    nb = new_notebook(cells=cells)
    nb.metadata["kernelspec"] = {
        "name": "riskbench",
        "display_name": "riskbench (this environment)",
        "language": "python",
    }
    nb.metadata["language_info"] = {"name": "python"}
    return nb


def write_notebooks(folder: str | Path) -> list[Path]:
    """Write the four stage notebooks into ``folder``; return their paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for stage, filename in STAGE_NOTEBOOKS:
        nb = stage_notebook(stage)
        # stable cell ids so that rewriting the committed notebooks gives the same bytes
        for i, cell in enumerate(nb.cells):
            cell["id"] = f"{stage}-{i}"
        path = folder / filename
        nbformat.write(nb, str(path))
        paths.append(path)
    return paths


if __name__ == "__main__":  # python -m riskbench.workflow.notebook_builder notebooks/
    import sys

    for p in write_notebooks(sys.argv[1] if len(sys.argv) > 1 else "notebooks"):
        print(p)
