"""Studies of fine-tuning strategies: the results table, its statistics and the report.

Holds:
    statistics -- IQM, stratified bootstrap, probability of improvement, Fisher, transfer, budget.
    results -- the results.jsonl row format (ResultRow) and its reader and writer.
    view -- a study's rows with the headline choices the report makes from them.
    compare_sections -- report sections on final success: tables, improvement, budget, share.
    training_sections -- report sections on training: chains, curves, tensorboard, filmstrips.
    document -- the report's document model and its HTML and Markdown renderers.
    figures -- matplotlib (Agg) figures returned as PNG bytes.
    report -- ``qadapt report``: report.html and summary.md from a study directory.
"""
