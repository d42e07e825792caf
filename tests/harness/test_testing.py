"""harness.testing: the conformance report, its strict mode, and the synthetic builders."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import NoChange
from harness.models.contract import CheckCase
from harness.testing import (
    CheckReport,
    check_deterministic_trend,
    check_model,
    check_output_contract,
    default_case,
    make_infoset,
    make_targets,
    model_checks,
    simulated_panel,
)


class Leading(NoChange):
    """A deliberately broken random walk with drift: each target gets the next period's draws."""

    def draw(self, layout, rng):
        from dataclasses import replace

        return super().draw(replace(layout, target_ordinals=layout.target_ordinals + 1), rng)


def test_report_lists_every_check_with_its_status():
    """The report holds one result per check, in order, and .ok is True when none failed."""
    report = check_model(NoChange(mean="sample"))
    assert isinstance(report, CheckReport) and report.ok
    assert [r.name for r in report.results] == [c.__name__ for c in model_checks()]
    assert all(r.status == "passed" and r.doc and r.seconds >= 0 for r in report.results)
    text = str(report)
    assert text.splitlines()[0] == f"model 'nochange': {len(report.results)} passed, 0 failed, 0 skipped"
    assert "pass  check_deterministic_trend" in text


def test_failures_are_reported_with_why_and_raise_only_on_request():
    """A failing model gets a report saying which check failed and why; raising is explicit."""
    report = check_model(Leading(mean="sample"))
    assert not report.ok
    assert [r.name for r in report.failed] == ["check_deterministic_trend"]
    msg = report["check_deterministic_trend"].message
    assert msg.startswith("AssertionError: output at h=0") and "+1.00 periods" in msg
    assert "FAIL  check_deterministic_trend: AssertionError" in str(report)
    with pytest.raises(AssertionError, match=r"model 'nochange' failed 1 check\(s\):\n  check_deterministic_trend"):
        report.raise_if_failed()
    with pytest.raises(AssertionError, match="check_deterministic_trend"):
        check_model(Leading(mean="sample"), strict=True)
    assert check_model(NoChange(mean="sample"), strict=True).ok  # strict returns the report


def test_checks_can_be_selected_and_cases_passed_whole():
    """checks= runs a subset; a CheckCase brings its own model, data and deterministic path."""
    report = check_model(NoChange(), checks=[check_output_contract])
    assert [r.name for r in report.results] == ["check_output_contract"]
    info = make_infoset(simulated_panel(50, 2, seed=3), ["a", "b"])
    case = CheckCase("short", NoChange(), info=info, targets=make_targets(info, ["a"], (-1, 0, 3)),
                     exact_path="constant")
    report = check_model(case, checks=[check_deterministic_trend])
    assert report.ok and report.case == "short"
    # a random walk without drift does not continue a line: the same case with a linear path fails
    assert not check_model(NoChange(), info, case.targets, checks=[check_deterministic_trend]).ok
    with pytest.raises(TypeError, match="either a CheckCase or info/targets"):
        check_model(case, info)
    with pytest.raises(KeyError, match="no check named 'check_nothing'"):
        report["check_nothing"]


def test_trend_law_tolerance_is_a_tenth_of_a_step():
    """A model off by a fifth of a period's step fails; by a twentieth, it passes (common practice)."""

    class Offset(NoChange):
        shift = 0.0

        def draw(self, layout, rng):
            out = super().draw(layout, rng)
            return out + self.shift  # the first variable's step is 1.0 per period

    for shift, ok in ((0.2, False), (0.05, True)):
        Offset.shift = shift
        info, targets = default_case()
        report = check_model(Offset(mean="sample"), info, make_targets(info, ["output"], (0, 1)),
                             checks=[check_deterministic_trend])
        assert report.ok is ok, str(report)


def test_simulated_panel_is_seeded_and_ragged():
    """simulated_panel is a deterministic function of its seed; ragged keeps only column 0 last."""
    a, b = simulated_panel(seed=4), simulated_panel(seed=4)
    np.testing.assert_array_equal(a, b)
    assert np.isfinite(a[-1, 0]) and np.isnan(a[-1, 1:]).all()
    assert not np.array_equal(a, simulated_panel(seed=5))


def test_make_infoset_puts_the_current_period_after_the_panel():
    """By default horizon 0 is the first period without data, and bad shapes are refused."""
    info = make_infoset(np.ones((8, 2)), ["a", "b"], start="2001Q1")
    assert str(info.current) == "2003Q1" and str(info.periods[-1]) == "2002Q4"
    with pytest.raises(ValueError, match=r"values must be \(T, 2\)"):
        make_infoset(np.ones((8, 3)), ["a", "b"])
