"""riskbench.cohort"""
