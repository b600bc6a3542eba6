"""Write ``notebooks/own_cohort_walkthrough.ipynb``: from three raw CSV tables to a report, step by step.

The walkthrough is for a new user's first analysis: check the configuration (every problem at once), see the
covariate columns the cohort stage will create, see what happened to every input row, then run the whole
analysis. It starts from the messy demo cohort (invented data with realistic defects); change
``config_path`` to one's own configuration. Like the stage notebooks it only calls the library.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

WALKTHROUGH = "own_cohort_walkthrough.ipynb"

_INTRO = """# From three raw tables to a report

This notebook runs a first analysis of a cohort the way a new user would: it checks the configuration
against the files, lists the covariates the cohort stage will create, shows what happened to every input
row, and runs the whole analysis into a run folder with its report. It starts from the **messy demo
cohort** (`demo_data/messy/`: invented patients, with duplicates, impossible values, mixed units, values
after the outcome, dates before entry and patients without follow-up). For your own data, write a
configuration (see `docs/own_cohort.md`) and set `config_path` below.

> Research software, not a medical device. Results are not for clinical decisions without proper
> validation; follow local ethics approval, data-protection rules and clinical governance."""

_PARAMETERS = """# Parameters (papermill can replace them).
config_path = "../configs/messy_demo.toml"   # the analysis configuration
out = "../results/messy_walkthrough"         # the run folder the analysis creates
run = True                                   # False: stop after the checks (no analysis run)"""

_CELLS: tuple[tuple[str, str], ...] = (
    (
        "## 1. Check the configuration\n\nEvery key, the headers of the three files and a sample of their rows. "
        "A problem stops here with every problem listed at once (key, value, what is allowed, a near miss); "
        "warnings and keys of the previous release are printed and do not stop anything.",
        "from riskbench.workflow.config import load_config\n\n"
        "config = load_config(config_path, check_data=True)\n"
        "for message in (*config.deprecations, *config.warnings):\n"
        "    print(message)",
    ),
    (
        "## 2. The covariates the cohort stage creates\n\nModels name their covariates by these columns "
        "(the command `riskbench list-covariates` prints the same list).",
        "import pandas as pd\n\n"
        "from riskbench.workflow.config_command import covariate_rows\n\n"
        'pd.DataFrame(covariate_rows(config), columns=["column", "label (unit)", "used by models"])',
    ),
    (
        "## 3. Every input row accounted for\n\nThe ledger gives each input row one state: used, or excluded "
        "with a reason. Per table: the rows read, the rows each check excluded, and the rows used. (These are "
        "counts of your own data on your own machine; the report hides small counts.)",
        "from riskbench.workflow.stage_cohort import build_stage_cohort\n\n"
        "cohort = build_stage_cohort(config)\n"
        'cohort.flow[["table", "state", "remaining", "excluded"]]',
    ),
    (
        "## 4. Run the whole analysis\n\nThe four stage notebooks run into the run folder; the last line is "
        "the report. A part of the report that cannot be computed becomes a note there; the run finishes.",
        "from riskbench.workflow.runner import run_analysis\n\n"
        "if run:\n"
        "    result = run_analysis(config_path, out, overwrite=True)\n"
        "    print(result.report)",
    ),
)


def walkthrough_notebook() -> nbformat.NotebookNode:
    """The walkthrough notebook (see the module docstring)."""
    params = new_code_cell(_PARAMETERS)
    params.metadata["tags"] = ["parameters"]
    cells = [new_markdown_cell(_INTRO), params]
    for text, code in _CELLS:
        cells += [new_markdown_cell(text), new_code_cell(code)]
    for i, cell in enumerate(cells):
        cell["id"] = f"walkthrough-{i}"  # stable ids: rewriting gives the same bytes
    nb = new_notebook(cells=cells)
    nb.metadata["kernelspec"] = {
        "name": "riskbench",
        "display_name": "riskbench (this environment)",
        "language": "python",
    }
    nb.metadata["language_info"] = {"name": "python"}
    return nb


def write_walkthrough(folder: str | Path) -> Path:
    """Write the walkthrough notebook into ``folder``; return its path."""
    path = Path(folder) / WALKTHROUGH
    path.parent.mkdir(parents=True, exist_ok=True)
    nbformat.write(walkthrough_notebook(), str(path))
    return path


if __name__ == "__main__":  # python -m riskbench.workflow.walkthrough_notebook notebooks/
    import sys

    print(write_walkthrough(sys.argv[1] if len(sys.argv) > 1 else "notebooks"))
