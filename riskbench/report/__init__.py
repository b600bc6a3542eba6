"""riskbench.report"""
