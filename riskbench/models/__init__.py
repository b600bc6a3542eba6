"""riskbench.models"""
