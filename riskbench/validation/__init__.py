"""riskbench.validation"""
