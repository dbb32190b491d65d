"""Outputs: exit code, terminal table, JSON, SARIF, JUnit, markers, baselines, plots, HTML."""
