"""``qadapt report`` on a small synthetic study (synthetic rows; the figures are checked against
statistics computed here from scipy and by hand)."""

from __future__ import annotations

import base64
import html as html_text
import json
import re

import numpy as np
import pytest
from scipy import stats as scipy_stats

from qadapt.study.report import build_report, report_main
from qadapt.study.results import read_results
from qadapt.study.view import StudyView

EPISODES = 50
# Headline runs (100 new episodes, share 0.5, 4 seeds): successes out of 50 per seed.
HEADLINE = {
    ("warm", "finger_offset"): [30, 35, 40, 45],
    ("warm", "drive_lag"): [25, 26, 27, 28],
    ("scratch", "finger_offset"): [20, 22, 24, 40],
    ("scratch", "drive_lag"): [10, 12, 14, 16],
}
# Budget sweep (same share and steps, 2 seeds, both variations): successes per run.
SWEEP = {("warm", 25): 15, ("warm", 50): 28, ("scratch", 25): 8, ("scratch", 50): 12}
# In-training curves (20 episodes per point, steps 250 ... 2000).
CURVE_STEPS = list(range(250, 2001, 250))
CURVES = {"warm": [6, 12, 15, 16, 16, 15, 16, 16], "scratch": [1, 2, 3, 5, 7, 9, 10, 10]}
# A warm chain over three variations (one seed): successes out of 40, rows = after step i.
CHAIN_ORDER = ["finger_offset", "drive_lag", "camera_shift"]
CHAIN = [[30, 10, 12, 36], [22, 32, 14, 30], [20, 28, 34, 26]]  # last column: base "none"


def _row(run_id, strategy, variation, seed, budget, successes, chain_step=None, curve=(),
         evaluations=None, logdir=None):
    if evaluations is None:
        evaluations = [{"variation": variation, "successes": successes, "episodes": EPISODES,
                        "returns": [], "lengths": []},
                       {"variation": "none", "successes": 40, "episodes": EPISODES,
                        "returns": [], "lengths": []}]
    return {"run_id": run_id, "variation": variation, "strategy": strategy, "seed": seed,
            "new_episodes": budget, "share": 0.5, "indicator": False, "steps": 2000,
            "chain_step": chain_step, "evaluations": evaluations, "curve": list(curve),
            "checkpoint": f"runs/{run_id}/checkpoints/best", "run_dir": f"runs/{run_id}",
            "logdir": logdir}


def synthetic_rows(with_chain: bool = True) -> list[dict]:
    rows = []
    for (strategy, variation), counts in HEADLINE.items():
        for seed, successes in enumerate(counts):
            curve = [{"step": s, "successes": k, "episodes": 20}
                     for s, k in zip(CURVE_STEPS, CURVES[strategy], strict=True)]
            rows.append(_row(f"{strategy}-{variation}-100-s{seed}", strategy, variation, seed,
                             100, successes, curve=curve))
    for (strategy, budget), successes in SWEEP.items():
        for variation in ("finger_offset", "drive_lag"):
            for seed in (0, 1):
                rows.append(_row(f"{strategy}-{variation}-{budget}-s{seed}", strategy, variation,
                                 seed, budget, successes))
    if with_chain:
        for step, counts in enumerate(CHAIN):
            evaluations = [{"variation": v, "successes": k, "episodes": 40, "returns": [],
                            "lengths": []} for v, k in zip(CHAIN_ORDER + ["none"], counts,
                                                           strict=True)]
            rows.append(_row(f"chain-warm-{step}", "warm", CHAIN_ORDER[step], 0, 100, 0,
                             chain_step=step, evaluations=evaluations))
    return rows


def write_study(path, rows) -> None:
    path.mkdir(parents=True, exist_ok=True)
    (path / "results.jsonl").write_text("".join(json.dumps(r) + "\n" for r in rows))


def _headings(html: str) -> list[str]:
    return re.findall(r"<h2>(.*?)</h2>", html)


def test_report_sections_and_numbers(tmp_path):
    study = tmp_path / "study"
    write_study(study, synthetic_rows())
    html_path, markdown_path = build_report(study, level=0.5, base_variation="none", reps=200)
    html = html_path.read_text()
    assert markdown_path.read_text().startswith("# Study report")

    # Self-contained: no links out, every image inline.
    assert "http://" not in html and "https://" not in html and 'src="file' not in html
    sources = re.findall(r'src="([^"]*)"', html)
    assert sources and all(s.startswith("data:image/png;base64,") for s in sources)
    for source in sources:
        assert base64.b64decode(source.split(",", 1)[1]).startswith(b"\x89PNG")

    assert _headings(html) == ["Study", "Success per variation and strategy",
                               "Probability of improvement", "Data budget",
                               "Forgetting in chains", "Learning curves", "Filmstrips"]

    # IQM across 4 seeds = scipy.stats.trim_mean(x, 0.25) when n is a multiple of 4 (the IQM of
    # Agarwal et al., 2021): warm finger_offset (0.7 + 0.8) / 2 = 75.0%, scratch (0.44+0.48)/2.
    for (strategy, variation), counts in HEADLINE.items():
        iqm = scipy_stats.trim_mean(np.array(counts) / EPISODES, 0.25)
        assert f"{100 * iqm:.1f}% [" in html, (strategy, variation)
    assert "75.0% [" in html and "46.0% [" in html

    # Per-run Wilson interval: 30/50, reference scipy.stats.binomtest(...).proportion_ci(wilson).
    ci = scipy_stats.binomtest(30, EPISODES).proportion_ci(method="wilson")
    assert f"60.0% [{100 * ci.low:.1f}, {100 * ci.high:.1f}]" in html

    # Probability of improvement = mean over variations of U / (n m), U from
    # scipy.stats.mannwhitneyu (Agarwal et al., 2021).
    probability = np.mean([
        scipy_stats.mannwhitneyu(HEADLINE[("warm", v)], HEADLINE[("scratch", v)]).statistic / 16
        for v in ("finger_offset", "drive_lag")
    ])
    assert f"P(warm &gt; scratch)</td><td>{probability:.3f} [" in html

    # Fisher exact test on pooled headline counts, one-sided (scipy.stats.fisher_exact).
    warm_wins = sum(sum(HEADLINE[("warm", v)]) for v in ("finger_offset", "drive_lag"))
    scratch_wins = sum(sum(HEADLINE[("scratch", v)]) for v in ("finger_offset", "drive_lag"))
    fisher = scipy_stats.fisher_exact([[warm_wins, 400 - warm_wins],
                                       [scratch_wins, 400 - scratch_wins]], alternative="greater")
    assert f"{warm_wins}/400" in html and f"{fisher.pvalue:.3g}" in html

    # Budget answer, Wilson lower bounds from scipy: 25 -> 60/200, 50 -> 112/200, 100 -> 256/400.
    pooled = {25: (60, 200), 50: (112, 200), 100: (warm_wins, 400)}
    lows = {b: scipy_stats.binomtest(k, n).proportion_ci(method="wilson").low
            for b, (k, n) in pooled.items()}
    expected = min(b for b, low in lows.items() if low > 0.5)
    assert expected == 100
    assert f"clears 50.0% is {expected} new episodes" in html

    # Backward transfer by hand (Lopez-Paz and Ranzato, 2017), rates out of 40:
    # ((20/40 - 30/40) + (28/40 - 32/40)) / 2 = (-0.25 - 0.1) / 2 = -0.175.
    assert "backward transfer -0.175 on the pooled matrix" in html

    # Plateau: last 20% of 8 points = ceil(1.6) = 2 points. warm: (16 + 16) / 2 / 20 = 0.8,
    # 95% = 0.76, first reached by 16/20 = 0.8 (step 1000; 15/20 = 0.75 at 750 falls short).
    # scratch: plateau 10/20 = 0.5, 0.475 first reached by 10/20 (step 1750).
    # Ratio 1000 / 1750 = 0.57.
    assert "warm reaches 95% of its plateau (80.0%) at step 1000" in html
    assert "scratch reaches 95% of its plateau (50.0%) at step 1750. Ratio 0.57" in html
    assert "not within a quarter" in html
    assert "No filmstrips" in html


def test_optional_sections_follow_the_data(tmp_path):
    study = tmp_path / "study"
    rows = synthetic_rows(with_chain=False)
    for row in rows:
        row["curve"] = []
    for seed in range(2):  # a second share for warm: the share section appears
        rows.append(_row(f"warm-share-s{seed}", "warm", "finger_offset", seed, 100, 33))
        rows[-1]["share"] = 0.8
    write_study(study, rows)
    strips = study / "filmstrips"
    strips.mkdir()
    from qadapt.study.figures import Line, Panel, line_panels

    picture = line_panels([Panel("strip", "x", "y", [Line("a", (0, 1), (0, 1))])])
    (strips / "warm.png").write_bytes(picture)
    out = tmp_path / "out"
    html_path, _ = build_report(study, out=out, reps=100)
    html = html_path.read_text()
    headings = _headings(html)
    assert "Forgetting in chains" not in headings and "Learning curves" not in headings
    assert "New-data share" in headings
    assert "Filmstrip: warm" in html
    assert base64.b64encode(picture).decode() in html
    assert (out / "summary.md").is_file()


def test_training_logs_are_plotted(tmp_path):
    from torch.utils.tensorboard import SummaryWriter

    study = tmp_path / "study"
    rows = synthetic_rows(with_chain=False)[:2]
    for index, row in enumerate(rows):
        logdir = f"logs/{index}"
        writer = SummaryWriter(str(study / logdir))
        for step in range(1, 6):
            writer.add_scalar("train/td_loss", 1.0 / step, step)
            writer.add_scalar("train/steps_per_second", 100.0, step)
        writer.close()
        row["logdir"] = logdir
    rows[1]["logdir"] = "logs/absent"
    write_study(study, rows)
    html = build_report(study, reps=50)[0].read_text()
    assert "Training logs" in _headings(html)
    assert "Log directories not found: warm-finger_offset-100-s1 (logs/absent)" in html


def test_empty_or_malformed_results_are_clear_errors(tmp_path, capsys):
    study = tmp_path / "study"
    study.mkdir()
    (study / "results.jsonl").write_text("")
    with pytest.raises(ValueError, match="no result rows"):
        build_report(study)
    lines = [json.dumps(r) for r in synthetic_rows()[:2]]
    lines[1] = lines[1].replace('"seed": 1', '"seed": "one"')
    (study / "results.jsonl").write_text("\n".join(lines) + "\n")
    with pytest.raises(ValueError, match="line 2: seed"):
        build_report(study)
    assert report_main([str(study)]) == 2
    assert "line 2: seed" in capsys.readouterr().err
    assert not (study / "report.html").exists()
    with pytest.raises(ValueError, match="no such results file"):
        build_report(tmp_path)
    write_study(study, synthetic_rows()[:2])
    with pytest.raises(ValueError, match="--base-variation"):
        build_report(study, base_variation="camera_scale")
    with pytest.raises(ValueError, match="--level"):
        build_report(study, level=1.5)
    assert report_main([str(study), "--reps", "50"]) == 0
    assert (study / "report.html").is_file()


# Rounds of adaptation on finger_offset (2 seeds): successes out of 50 on the variation per
# round and seed; the base scores 15/50 there in each of its two evaluation rows.
ROUNDS = {1: [20, 22], 2: [26, 30], 3: [33, 35]}


def test_rounds_section_pools_each_round_and_tests_the_last_against_the_base(tmp_path):
    rows = synthetic_rows(with_chain=False)
    for seed in (0, 1):
        rows.append(_row(f"base-finger_offset-s{seed}", "base", "finger_offset", seed, 0, 15))
        for number, counts in ROUNDS.items():
            row = _row(f"rounds-warm-s{seed}-r{number}", "warm", "finger_offset", seed, 100,
                       counts[seed], chain_step=number)
            rows.append({**row, "round": number})
    study = tmp_path / "study"
    write_study(study, rows)
    html = build_report(study, level=0.5, base_variation="none", reps=200)[0].read_text()
    headings = _headings(html)
    assert "Rounds of adaptation" in headings
    # Rounds rows are not a chain of variations: no forgetting matrix is made of them.
    assert "Forgetting in chains" not in headings
    assert "<td>round 3</td><td>300 in all</td><td>68.0% (68/100)</td>" in html
    assert "<td>base</td><td>0</td><td>30.0% (30/100)</td>" in html
    # One-sided Fisher exact test, last round against the base (scipy.stats.fisher_exact).
    p = scipy_stats.fisher_exact([[68, 32], [30, 70]], alternative="greater").pvalue
    assert f"against the base one-sided p = {p:.3g}" in html


def test_rounds_section_sets_a_retrain_on_the_rounds_data_beside_the_last_round(tmp_path):
    rows = synthetic_rows(with_chain=False)
    for seed in (0, 1):
        for number, counts in ROUNDS.items():
            row = _row(f"rounds-warm-s{seed}-r{number}", "warm", "finger_offset", seed, 100,
                       counts[seed], chain_step=number)
            rows.append({**row, "round": number})
        retrain = _row(f"rounds-warm-s{seed}-retrain", "scratch_mix", "finger_offset", seed,
                       100, (24, 28)[seed])
        rows.append({**retrain, "steps": 6000, "trained_on_rounds": 3,
                     "rounds_strategy": "warm"})
    study = tmp_path / "study"
    write_study(study, rows)
    view = StudyView(read_results(study / "results.jsonl"), study, level=0.5)
    # A retrain is neither a headline run nor a round.
    assert not any("trained_on_rounds" in r.extra for r in view.standalone + view.rounds)
    assert len(view.rounds_retrains) == 2
    html = html_text.unescape(
        build_report(study, level=0.5, base_variation="none", reps=200)[0].read_text())
    assert "6 rounds and 2 one-run retrains on rounds' data; strategies" in html
    assert ("<td>scratch_mix, one run of 6000 steps on the rounds' data</td>"
            "<td>300 in all</td><td>52.0% (52/100)</td>") in html
    # One-sided Fisher exact test, last round (68/100) against the retrain (52/100)
    # (scipy.stats.fisher_exact).
    p = scipy_stats.fisher_exact([[68, 32], [52, 48]], alternative="greater").pvalue
    assert f"against scratch_mix in one run on the same data one-sided p = {p:.3g}" in html
