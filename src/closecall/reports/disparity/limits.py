"""What each section of the disparity report cannot show, in plain words.

One source for the terminal, the HTML report and ``--json``; docs/disparity.md says the same at
more length.
"""

from __future__ import annotations

LIMITS: dict[str, tuple[str, ...]] = {
    "population": (
        "Unreviewed and deferred cases keep the model's decision: the figures say what review "
        "changed, not what every decision would have been had every case been reviewed.",
        "The ratio intervals treat the most favoured group as fixed and the groups as "
        "independent samples; they describe sampling noise, not whether the gap is justified.",
    ),
    "reviewed": (
        "Reviews are of close calls, so these rates describe the reviewed cases only; a change "
        "of a few points among close calls can be a much smaller change across all cases.",
        "The four-fifths rule is a rule of thumb from US employment selection, not a test; "
        "whether it is the right yardstick is a legal question for your jurisdiction.",
    ),
    "calibration": (
        "Calibration is measured against the recorded outcomes of the history. If those "
        "outcomes carry a bias (a group's successes under-recorded), a model can look "
        "calibrated against them and still be unfair.",
        "A slope near 1 with a wide interval is not evidence of good calibration; read the "
        "power line.",
        "Held-out scores are from models trained on the other folds, not the very fit that "
        "scores the pending cases.",
    ),
    "heldout_errors": (
        "Error rates need outcomes, and the history's outcomes were observed under past "
        "decisions: cases refused in the past may never show what they would have done "
        "(selective labels).",
        "Equal false-favourable and false-unfavourable rates cannot in general both hold with "
        "equal calibration when base rates differ; choosing which to equalise is a policy "
        "question, not a statistical one.",
    ),
    "overrides": (
        "Raw override rates do not hold the margin equal: a group whose close calls sit nearer "
        "the threshold can be overridden more for reasons unrelated to the group.",
    ),
    "conditional": (
        "'Equal margin' controls for the model's score only, linearly in log-odds. Anything "
        "reviewers legitimately saw that the model did not, and that differs between groups, "
        "shows up as a group effect.",
        "An odds ratio is not a ratio of probabilities; with common overrides an odds ratio of "
        "2 means less than twice the probability.",
        "Cases are rarely assigned to reviewers at random; differences between reviewers may "
        "reflect the cases they got.",
    ),
    "reviewers": (
        "Many reviewers means many tests; read the corrected p-values, not the raw ones.",
        "A small reviewer × group cell cannot show a difference even if there is one.",
    ),
    "outcomes": (
        "Outcomes are often observed only after a favourable decision (selective labels); "
        "error rates on the cases that do have outcomes can be badly biased, and differently "
        "for the model and for the reviewers.",
        "McNemar's test compares model and final decisions on the same cases; it cannot say "
        "whether reviewers would have done better on cases they did not review.",
    ),
    "periods": (
        "Periods with few reviews have wide intervals; a change between two periods is only "
        "evidence when the intervals separate.",
        "The period is that of the effective review's entry in the ledger, not of the application.",
    ),
    "multiplicity": (
        "Holm's correction keeps the chance of any false finding in a family at 5 %; it makes "
        "each test less able to detect a real difference.",
        "Families are the report's own grouping; a test run elsewhere on the same data is not "
        "counted.",
    ),
    "power": (
        "'No evidence of a difference' is not 'no difference': each test's power line gives "
        "the smallest effect it would have detected 80 % of the time.",
    ),
}
