"""Real-data check: questions written by real people (the Debian documentation FAQs, built at
test time from Debian's packages, cached between runs, versions and checksums recorded in
sources.json). ballast tunes on inverse-cloze queries (pinned here: the figure below was
measured with them, and they train in half the time of the default's two kinds of query) from
half of the answer documents only,
and must beat the base model on the real questions whose answers lie in the other half
(split ``human_heldout``) by the gate's superiority rule (interval above zero, randomization
test significant), and pass the gate (human must gain, human_heldout must not lose).
Measured 2026-12-02: +0.0215 nDCG@10 [+0.0094, +0.0342] on 456 questions."""

from __future__ import annotations

from pathlib import Path

import pytest

pytestmark = pytest.mark.slow


def test_tuned_beats_base_on_real_questions_of_unseen_documents(tmp_path: Path) -> None:
    from bench import faq_gain, faqdata

    try:
        ict = ['synth.generators=["ict"]']
        result = faq_gain.run(tmp_path / "faq", faq_gain.default_cache(), ict)
    except faqdata.FetchError as exc:
        pytest.skip(f"cannot download the Debian documentation packages: {exc}")
    print(faq_gain.table(result))  # shown with -s, and kept in the test log on failure
    held = next(s for s in result["gate"]["splits"] if s["split"] == "human_heldout")
    assert held["n_queries"] >= 300
    assert result["gate"]["passed"], result["gate"]["summary"]
    assert result["gate"]["evidence"] == "real"
    c = result["metrics"]["splits"]["human_heldout"]["comparisons"]["tuned_vs_base"]["ndcg@10"]
    assert c["mean_diff"] > 0 and c["ci_low"] > 0 and c["p_value"] <= 0.05
