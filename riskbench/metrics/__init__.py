"""riskbench.metrics"""
