import math

import pytest

from tsarchive.budget import DEFAULT_SPEC, Budget, parse_budget, parse_budget_spec
from tsarchive.errors import BudgetError


def test_forms():
    assert parse_budget("0.02") == Budget("abs", 0.02)
    assert parse_budget("0.1%") == Budget("pct", 0.1)
    assert parse_budget("lossless") == Budget("lossless")
    assert parse_budget("1e-3") == Budget("abs", 1e-3)


def test_per_channel_and_default():
    s = parse_budget_spec("temp=0.05,accel=0.1%")
    assert s.for_channel("temp") == Budget("abs", 0.05)
    assert s.for_channel("accel") == Budget("pct", 0.1)
    assert s.for_channel("other") == parse_budget(DEFAULT_SPEC)
    s = parse_budget_spec("lossless,temp=0.05")
    assert s.for_channel("x").kind == "lossless"


def test_resolve_percentage_of_range():
    assert math.isclose(Budget("pct", 0.1).resolve(50.0), 0.05)
    assert Budget("abs", 0.2).resolve(1e9) == 0.2
    assert Budget("lossless").resolve(10) == 0.0
    assert Budget("pct", 1).resolve(0.0) == 0.0  # constant channel: exact


@pytest.mark.parametrize("bad", ["", "abc", "-1", "0.1%%", "nan", "inf", "x=", "=0.1", "0.1,0.2", "a=1,a=2", "200%"])
def test_bad_specs_raise_one_line(bad):
    with pytest.raises(BudgetError) as e:
        parse_budget_spec(bad)
    assert "\n" not in str(e.value)


def test_unknown_channel_named():
    with pytest.raises(BudgetError, match="nope"):
        parse_budget_spec("nope=1").check_names(["a", "b"])


def test_spec_round_trip():
    s = parse_budget_spec("0.5%,temp=0.05,hum=lossless")
    assert parse_budget_spec(s.spec) == s


@pytest.mark.parametrize("zero", ["0", "0%", "0.0", "temp=0"])
def test_zero_budget_is_refused_and_says_what_to_write(zero):
    # a zero budget used to mean lossless silently; it now asks for the word (common practice, no source)
    with pytest.raises(BudgetError, match="'lossless'"):
        parse_budget_spec(zero)


def test_pack_time_channel_problem_is_input_not_damage(tmp_path):
    # A channel whose stated decimals no grid can hold is the caller's input, not a damaged archive.
    import numpy as np
    import tsarchive
    from tsarchive.errors import ArchiveCorrupt, BadInput
    from tsarchive.recording import ChannelInfo, Recording
    x = np.linspace(0.0, 1.0, 3000)[:, None]
    rec = Recording(data=x, rate=10.0, channels=(ChannelInfo("a", decimals=20),), shape=x.shape)
    with pytest.raises(BadInput) as e:
        tsarchive.pack(rec, tmp_path / "a.tsa", budget="lossless", code_size=0)
    assert not isinstance(e.value, ArchiveCorrupt) and "damaged" not in str(e.value) and "\n" not in str(e.value)
    assert not (tmp_path / "a.tsa").exists()


def test_fields_and_within_budget():
    from tsarchive.budget import spec_from_fields, within_budget
    # the typed "name=spec,..." form is the reference for what per-channel fields mean
    assert spec_from_fields(["a", "b"], ["0.02", ""]) == parse_budget_spec("a=0.02,b=0.1%")
    assert within_budget(0.5, 0.5) and not within_budget(0.5000001, 0.5) and not within_budget(None, 1.0)
