"""riskbench.workflow"""
