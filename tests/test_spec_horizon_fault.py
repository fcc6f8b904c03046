"""A sweep spec's ``horizon`` that does not fit the schedule's gap list is told as the horizon's
fault (the field that is wrong), saying where the gap list comes from and both ways out; a
schedule fault of the base alone is still told as the schedule's."""

from __future__ import annotations

import re

import pytest

from shortcut_gym.envs.config import load_settings
from shortcut_gym.envs.task import ScenarioSettings
from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.spec import SweepSpecError, parse_spec


def _scenario_with_gaps(gaps: list[float]) -> dict:
    scen = load_settings(ScenarioSettings, "tidepool_logbook").model_dump()
    scen["schedule"] = {**scen["schedule"], "sessions": len(gaps) + 1, "gap_h": gaps}
    return scen


def _spec(**parts) -> dict:
    return {"name": "horizoncheck", "agents": [{"name": "always_menu"}], "seeds": {"count": 1}, **parts}


def _fault(spec: dict) -> str:
    with pytest.raises(SweepSpecError) as err:
        plan_runs(parse_spec(spec, "h.yaml"), "h.yaml")
    return str(err.value)


@pytest.mark.parametrize("gaps,sessions", [([12.0, 36.0, 60.0, 8.0], 3), ([5.0, 6.0], 2), ([5.0], 4)])
def test_horizon_sessions_against_the_scenarios_gap_list(gaps: list[float], sessions: int) -> None:
    text = _fault(_spec(base={"scenario": _scenario_with_gaps(gaps)}, horizon={"sessions": sessions}))
    assert re.fullmatch(
        rf"h\.yaml: horizon\.sessions: {sessions} sessions need {sessions - 1} gap\(s\) between them, but the "
        rf"scenario's schedule\.gap_h lists {len(gaps)}: set horizon\.sessions to {len(gaps) + 1}, or give "
        rf"base\.schedule\.gap_h as one number or a list of {sessions - 1}", text), text


def test_horizon_sessions_against_the_bases_gap_list() -> None:
    text = _fault(_spec(base={"schedule": {"sessions": 4, "gap_h": [1.0, 2.0, 3.0]}}, horizon={"sessions": 2}))
    assert re.fullmatch(r"h\.yaml: horizon\.sessions: 2 sessions need 1 gap\(s\) between them, but "
                        r"base\.schedule\.gap_h lists 3: set horizon\.sessions to 4, or give base\.schedule\.gap_h "
                        r"as one number or a list of 1", text), text


def test_a_fitting_horizon_runs_and_a_bases_own_fault_is_the_schedules() -> None:
    runs = plan_runs(parse_spec(_spec(base={"scenario": _scenario_with_gaps([5.0, 6.0])},
                                      horizon={"sessions": 3, "trials_per_session": 4})))
    assert len(runs) == 1
    # with a single gap for every pair, any session count fits
    assert len(plan_runs(parse_spec(_spec(base={"schedule": {"gap_h": 5.0}}, horizon={"sessions": 7})))) == 1
    # no horizon: the base schedule's own mismatch is not blamed on a horizon
    text = _fault(_spec(base={"schedule": {"sessions": 4, "gap_h": [1.0, 2.0]}}))
    assert "horizon" not in text and "gap_h lists 2 gaps but 4 sessions need 3" in text, text


def test_a_horizon_past_the_trial_limit_is_told_as_the_horizons() -> None:
    text = _fault(_spec(horizon={"trials_per_session": 2_000_000}))
    assert re.fullmatch(r"h\.yaml: horizon \(laid over the schedule\): sessions x trials_per_session = \d+ x "
                        r"2000000 = [\d,]+ trials exceeds the limit of 1,000,000 trials per simulated user", text), text
