"""riskbench.workflow: analysis configuration, stage functions, notebook runner, run manifest, command line.

Only the configuration is imported here (it is light); the runner and the stage functions are imported from
their modules (``riskbench.workflow.runner``, ``riskbench.workflow.stages``).
"""

from riskbench.workflow.config import AnalysisConfig, ConfigError, load_config

__all__ = ["AnalysisConfig", "ConfigError", "load_config"]
