import pytest

from ident.errors import LogFormatError
from ident.io.columns import Entry, is_pattern, resolve, resolve_all

FLAT = [Entry("time", "s"), Entry("heater_1_duty", "%"), Entry("heater_2_duty", "%"),
        Entry("zone_1_temp", "degC"), Entry("zone_2_temp", "degC")]
GROUPED = [Entry("enc", "rad", "fast"), Entry("cmd", "V", "fast"), Entry("enc", "", "slow"),
           Entry("temp", "degC", "slow")]


def test_names_match_case_insensitively_and_ignore_a_unit():
    assert resolve("HEATER_1_DUTY", FLAT, path="p.csv") == [1]
    assert resolve("zone_2_temp [degC]", FLAT, path="p.csv") == [4]


def test_position_counts_from_one_in_listing_order():
    assert resolve("#2", FLAT, path="p.csv") == [1]
    assert resolve("# 5", FLAT, path="p.csv") == [4]
    with pytest.raises(LogFormatError, match=r"no column #6: the log has 5 columns \(#1-#5\)"):
        resolve("#6", FLAT, path="p.csv")
    with pytest.raises(LogFormatError, match="no column #0"):
        resolve("#0", FLAT, path="p.csv")


def test_a_pattern_takes_every_match_in_file_order():
    assert is_pattern("heater_*") and is_pattern("zone_?_temp") and not is_pattern("zone_1")
    assert resolve("Heater_*", FLAT, path="p.csv", single=False) == [1, 2]
    assert resolve_all(["zone_[12]_temp", "#2"], FLAT, path="p.csv") == [3, 4, 1]
    # the time column is never taken by a pattern
    assert resolve("*", FLAT, path="p.csv", single=False, exclude=[0]) == [1, 2, 3, 4]


def test_a_pattern_matching_several_where_one_is_expected_lists_them():
    with pytest.raises(LogFormatError) as info:
        resolve("heater_*", FLAT, path="p.csv", single=True)
    assert str(info.value) == ("p.csv: the pattern 'heater_*' matches 2 columns where one is expected: "
                               "heater_1_duty, heater_2_duty")


def test_near_misses_get_did_you_mean():
    with pytest.raises(LogFormatError) as info:
        resolve("heater_1_dutty", FLAT, path="p.csv")
    assert "no column named 'heater_1_dutty'; nearest: 'heater_1_duty'; available: time [s]" in str(info.value)
    assert info.value.hint == "did you mean 'heater_1_duty'?"
    with pytest.raises(LogFormatError) as info:
        resolve("zon_*_tmp", FLAT, path="p.csv", single=False)
    assert "no column matches the pattern 'zon_*_tmp'" in str(info.value)
    assert info.value.hint is not None and info.value.hint.startswith("did you mean 'zone_")


def test_groups_a_bare_name_in_two_groups_needs_its_group():
    assert resolve("cmd", GROUPED, path="r.mf4", word="channel") == [1]
    assert resolve("slow/enc", GROUPED, path="r.mf4", word="channel") == [2]
    assert resolve("*/enc", GROUPED, path="r.mf4", single=False, word="channel") == [0, 2]
    with pytest.raises(LogFormatError) as info:
        resolve("ENC", GROUPED, path="r.mf4", word="channel")
    assert str(info.value) == "r.mf4: channel name 'ENC' is not unique: fast/enc, slow/enc"
    assert info.value.hint == "name it with its group, e.g. 'fast/enc'"
