"""Run notes and flag severities (mixsolve.flags): the containers both kinds of doubt use.

The expected values are the definitions in docs/flags.md (two kinds of doubt), not
numbers from the code's constants.
"""

import json

from mixsolve import flags


def test_run_notes_round_trip_through_json_text_and_replace_by_code():
    attrs: dict = {}
    flags.add_run_notes(attrs, [flags.RunNote("shift_risk", flags.LOOK, "0.5 nm moves 3 %",
                                              "check the scale")])
    flags.add_run_notes(attrs, [flags.RunNote("shift_risk", flags.DOUBTFUL, "6 %", "fix"),
                                flags.RunNote("bandwidth_mismatch", flags.LOOK, "b", "c")])
    assert isinstance(attrs[flags.RUN_NOTES_ATTR], str)  # storable in netCDF attrs
    notes = flags.run_notes_of(attrs)
    assert [n.code for n in notes] == ["shift_risk", "bandwidth_mismatch"]
    assert notes[0].severity == flags.DOUBTFUL and notes[0].text == "6 %"
    assert json.loads(attrs[flags.RUN_NOTES_ATTR])[1]["fix"] == "c"
    assert flags.run_notes_of({}) == []


def test_doubtful_codes_come_first_and_component_suffix_is_ignored():
    codes = ["at_zero:rose", "above_range", "missing_readings", "lack_of_fit"]
    assert flags.by_severity(codes) == ["above_range", "lack_of_fit", "at_zero:rose",
                                        "missing_readings"]
    assert flags.severity_of("at_zero:rose") == flags.LOOK
    assert flags.severity_of("above_range") == flags.DOUBTFUL
