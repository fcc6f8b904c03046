"""A sweep spec's bad seeds are told in one plain line naming the field and the fault (no validator
internals, no second line about the other form seeds may take)."""

from __future__ import annotations

import pytest

from shortcut_gym.lab.sweep.spec import SweepSpecError, parse_spec

SPEC = {"name": "seedcheck", "agents": [{"name": "always_menu"}]}


@pytest.mark.parametrize(("seeds", "line"), [
    ({"count": 0}, r"seeds\.count: Input should be greater than or equal to 1 \(got 0\)"),
    ({"count": -3}, r"seeds\.count: Input should be greater than or equal to 1 \(got -3\)"),
    ({"first": -1, "count": 2}, r"seeds\.first: Input should be greater than or equal to 0 \(got -1\)"),
    ({"count": 2.5}, r"seeds\.count: Input should be a valid integer, got a number with a fractional part "
                     r"\(got 2\.5\)"),
    ({"count": 2, "firts": 4}, r"seeds\.firts: unknown key \(got 4\)"),
    ({"first": 2**63 - 1, "count": 2}, r"seeds: the last seed 9223372036854775808 exceeds 9223372036854775807"),
    ([1.5, 2], r"seeds\.0: Input should be a valid integer, got a number with a fractional part \(got 1\.5\)"),
    ([3, True], r"seeds: seed 1 is True, a bool, not a whole number \(got \[3, True\]\)"),
    ([], r"seeds: the seed list is empty \(got \[\]\)"),
    ([4, 4], r"seeds: the seed list repeats a seed \(got \[4, 4\]\)"),
    ("abc", r"seeds: must be a block \{first, count\} or a list of distinct seeds \(got 'abc'\)"),
    (5, r"seeds: must be a block \{first, count\} or a list of distinct seeds \(got 5\)"),
])
def test_a_bad_seed_field_is_one_plain_line(seeds: object, line: str) -> None:
    with pytest.raises(SweepSpecError) as err:
        parse_spec({**SPEC, "seeds": seeds}, "s.yaml")
    text = str(err.value)
    assert len(text.splitlines()) == 1, text
    assert "function-after" not in text and "list[int]" not in text and "SeedBlock" not in text, text
    assert __import__("re").fullmatch(rf"s\.yaml: {line}", text), text


def test_good_seed_fields_give_their_users() -> None:
    assert parse_spec({**SPEC, "seeds": {"count": 3}}).seed_list() == [0, 1, 2]
    assert parse_spec({**SPEC, "seeds": {"first": 10, "count": 2}}).seed_list() == [10, 11]
    assert parse_spec({**SPEC, "seeds": [7, 2**63 - 1]}).seed_list() == [7, 2**63 - 1]
