"""riskbench.demo"""
