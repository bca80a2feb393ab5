"""Studies of fine-tuning strategies: the results table, its statistics and the report.

Holds:
    statistics -- IQM, stratified bootstrap, probability of improvement, Fisher, transfer, budget.
    results -- the results.jsonl row format (ResultRow) and its reader and writer.
    report -- ``qadapt report``: report.html and summary.md from a study directory.
"""
