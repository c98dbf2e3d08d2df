"""Trust checks of one test: sample ratio, planned sample, whole weeks, enough conversions."""

from __future__ import annotations

from archive.analysis.results import CheckStatus, Settings, TrustCheck, known
from archive.records.model import Arm, Record
from archive.stats.srm import sample_ratio_test

MIN_EVENTS = 10  # common practice: at least 10 conversions and 10 non-conversions per arm for the normal approximation


def trust_checks(record: Record, arms: list[Arm], s: Settings) -> list[TrustCheck]:
    checks = []
    visitors = [known(a.visitors) for a in arms]
    plan = record.plan
    if plan is not None and plan.split is not None:
        weights, basis = [plan.split.get(a.name, 0.0) for a in arms], "the planned split"
    else:
        weights, basis = [1.0] * len(arms), "an equal split (no split was planned)"
    srm = sample_ratio_test(visitors, weights)
    shares = ", ".join(f"{a.name} {o:.2%}" for a, o in zip(arms, srm.observed_shares, strict=True))
    if srm.p_value < s.srm_alpha:
        checks.append(
            TrustCheck(
                "sample ratio",
                "failed",
                f"traffic split {shares} does not fit {basis} (chi-square {srm.chi_square:.2f}, df {srm.df}, "
                f"p {srm.p_value:.2g} < {s.srm_alpha:g}): assignment or tracking is broken, "
                "so the comparison may be biased",
                srm.p_value,
            )
        )
    else:
        status: CheckStatus = "ok" if plan is not None and plan.split is not None else "warning"
        checks.append(
            TrustCheck("sample ratio", status, f"split {shares} fits {basis} (p {srm.p_value:.2g})", srm.p_value)
        )

    least = min(visitors)
    fewest = min(known(a.conversions) for a in arms)
    floor = s.rules.min_conversions_without_plan
    if record.status != "finished":
        planned = f" of {plan.visitors_per_arm:,} planned" if plan is not None and plan.visitors_per_arm else ""
        checks.append(
            TrustCheck(
                "planned sample",
                "failed",
                f"status {record.status}: the test did not run to a planned end ({least:,} visitors in the smallest "
                f"arm{planned}); reading it now inflates false positives",
            )
        )
    elif plan is None or plan.visitors_per_arm is None:
        if fewest < floor:
            checks.append(
                TrustCheck(
                    "planned sample",
                    "warning",
                    f"no planned sample size and only {fewest:,} conversions in the smallest arm: no ship below "
                    f"{floor} per arm without a plan (common practice); without a pre-registered size the "
                    "fixed-horizon reading is unverifiable",
                )
            )
        else:
            checks.append(
                TrustCheck(
                    "planned sample",
                    "warning",
                    "no planned sample size: without a pre-registered size the fixed-horizon reading is "
                    "unverifiable (the test may have been stopped on seeing the data)",
                )
            )
    else:
        short = [a.name for a in arms if known(a.visitors) < plan.visitors_per_arm]
        if short:
            checks.append(
                TrustCheck(
                    "planned sample",
                    "failed",
                    f"analysed early: {least:,} visitors in the smallest arm of {plan.visitors_per_arm:,} planned "
                    f"({least / plan.visitors_per_arm:.0%}); stopping before the plan inflates false positives",
                )
            )
        else:
            checks.append(
                TrustCheck(
                    "planned sample",
                    "ok",
                    f"planned {plan.visitors_per_arm:,} per arm reached (smallest arm {least:,})",
                )
            )
    if record.started and record.ended:
        days = (record.ended - record.started).days + 1
        if days % 7:
            checks.append(
                TrustCheck(
                    "whole weeks",
                    "warning",
                    f"ran {days} days ({days / 7:.1f} weeks): weekday patterns are not balanced "
                    "(common practice: whole weeks)",
                )
            )
        else:
            checks.append(TrustCheck("whole weeks", "ok", f"ran {days} days ({days // 7} whole weeks)"))
    thin = [a.name for a in arms if min(known(a.conversions), known(a.visitors) - known(a.conversions)) < MIN_EVENTS]
    if thin:
        checks.append(
            TrustCheck(
                "enough conversions",
                "warning",
                f"fewer than {MIN_EVENTS} conversions or non-conversions in {', '.join(thin)}: "
                "z-test and normal intervals are rough; read the Bayesian figures",
            )
        )
    else:
        checks.append(
            TrustCheck(
                "enough conversions", "ok", f"at least {MIN_EVENTS} conversions and non-conversions in every arm"
            )
        )
    return checks
