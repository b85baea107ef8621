"""Scheme files: the built-ins validate; malformed files get a clear, located error.

Kind 2 (known answers): the schema check runs through jsonschema directly,
independently of the loader; error messages must name the file, the line and
the key (STYLE.md §3).
"""

from __future__ import annotations

import json
import re
import tomllib
from importlib import resources
from pathlib import Path

import jsonschema
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.scheme import builtin_schemes, load_scheme, parse_scheme, step_names

SCHEME_DIR = Path(resources.files("tubevision").joinpath("data", "schemes"))
GROUP1_TEXT = (SCHEME_DIR / "group1.toml").read_text("utf-8")
COLOUR_WORDS = {"colourless", "white", "grey", "black", "yellow", "orange", "red", "pink", "brown", "violet",
                "blue", "green"}  # the contract's vocabulary


def _schema():
    return json.loads(resources.files("tubevision").joinpath("data", "scheme.schema.json").read_text("utf-8"))


def test_schema_is_a_valid_json_schema():
    jsonschema.Draft202012Validator.check_schema(_schema())
    assert set(_schema()["$defs"]["colour"]["enum"]) == COLOUR_WORDS
    assert _schema()["$defs"]["state"]["enum"] == ["clear", "cloudy", "settled", "empty"]


@pytest.mark.parametrize("name", ["group1", "anions", "iron-thiocyanate", "copper-ammonia", "nickel-dmg",
                                  "chloride-limit"])
def test_builtin_scheme_validates_and_loads(name):
    assert name in builtin_schemes()
    doc = tomllib.loads((SCHEME_DIR / f"{name}.toml").read_text("utf-8"))
    jsonschema.Draft202012Validator(_schema()).validate(doc)
    s = load_scheme(name)
    assert s.name == name
    for st in s.steps:
        assert st.source.strip() and st.hazards and st.reactions, st.name
        # Cautions defer to the safety data sheet and local rules (project rule on hazards).
        assert any("SDS" in h and "local rules" in h for h in st.hazards), st.name
    assert "safety data sheet" in " ".join(s.safety.split())


def test_group1_has_the_contract_names_and_its_chemistry_notes():
    s = load_scheme("group1")
    assert s.analytes == ("Ag+", "Pb2+", "Hg2^2+")
    assert step_names(s) == ("chloride-precipitation", "hot-water-extraction", "chromate-test",
                             "ammonia-treatment", "acidification")
    text = GROUP1_TEXT
    for fact in ("1.8e-10", "1.7e-5", "1.4e-18", "2.8e-13", "CRC Handbook", "from memory",
                 "PbCrO4", "[Ag(NH3)2]+", "HgNH2Cl", "Cr(VI)", "carcinogenic", "centrifuge at once while hot",
                 "3.3 g/100 mL"):
        assert fact in text, fact
    chromate = s.step("chromate-test")
    assert dict(chromate.requires) == {"chloride-precipitation": "positive"}
    assert chromate.fraction == "supernatant"


def test_python_holds_no_chemistry_literals():
    # The chemistry lives in the data files (STYLE.md §5): the stage's Python
    # must not carry ion formulae, reagents or colour expectations.
    src = "".join(p.read_text("utf-8") for p in Path(resources.files("tubevision")).joinpath("scheme").glob("*.py"))
    for literal in ("Ag+", "Pb2+", "Hg2", "AgCl", "PbCl2", "CrO4", "NH3", "HNO3", "HCl", "SCN", "Cu2+", "Ni2+",
                    "BaSO4", "chromate", "white precipitate"):
        assert literal not in src, literal


def _line_of(text: str, needle: str, nth: int = 0) -> int:
    starts = [m.start() for m in re.finditer(re.escape(needle), text)]
    return text.count("\n", 0, starts[nth]) + 1


def test_bad_toml_names_file_and_line(tmp_path):
    p = tmp_path / "bench.toml"
    p.write_text('format = "tubevision.scheme/1"\n[scheme]\nname = "x\n', "utf-8")
    with pytest.raises(TubevisionInputError, match=r"scheme file .*bench.toml line 3: TOML syntax error"):
        load_scheme(p)


def test_schema_violation_names_key_and_line(tmp_path):
    bad = GROUP1_TEXT.replace('fraction = "residue"', 'fraction = "pellet"', 1)
    p = tmp_path / "g1.toml"
    p.write_text(bad, "utf-8")
    line = _line_of(bad, 'fraction = "pellet"')
    with pytest.raises(TubevisionInputError) as exc:
        load_scheme(str(p))
    msg = str(exc.value)
    assert f"line {line}: steps[1].fraction: 'pellet' is not one of precipitate" in msg
    assert "g1.toml" in msg and "\n" not in msg


def test_unknown_colour_word_names_its_line():
    bad = GROUP1_TEXT.replace('positive.pellet_colours = ["grey", "black"]',
                              'positive.pellet_colours = ["grey", "charcoal"]')
    line = _line_of(bad, '"charcoal"')
    with pytest.raises(TubevisionInputError,
                       match=rf"line {line}: steps\[3\]\.positive\.pellet_colours\[1\]: 'charcoal' is not one of"):
        parse_scheme(bad, where="g1.toml")


def test_missing_required_key_names_its_step():
    bad = GROUP1_TEXT.replace('reagent = "6 M aqueous NH3"\n', "", 1)
    line = _line_of(bad, "[[steps]]", 3)
    with pytest.raises(TubevisionInputError, match=rf"line {line}: steps\[3\]: 'reagent' is a required property"):
        parse_scheme(bad, where="g1.toml")


def test_unknown_key_is_named():
    bad = GROUP1_TEXT.replace('negative.pellet = "absent"\n', 'negative.pellet = "absent"\nnegative.smell = "none"\n', 1)
    with pytest.raises(TubevisionInputError, match=r"steps\[0\]\.positive|steps\[0\]\.negative.*smell"):
        parse_scheme(bad, where="g1.toml")


def test_rule_naming_an_unknown_step_is_refused():
    bad = GROUP1_TEXT.replace('{ when = { chloride-precipitation = "positive", chromate-test = "positive" }',
                              '{ when = { chloride-precipitation = "positive", chromate-tset = "positive" }')
    line = _line_of(bad, "chromate-tset")
    with pytest.raises(TubevisionInputError, match=rf"line {line}: calls\[1\]\.rules\[1\]\.when\.chromate-tset: "
                                                   "unknown step 'chromate-tset'"):
        parse_scheme(bad, where="g1.toml")


def test_requires_must_name_an_earlier_step():
    bad = GROUP1_TEXT.replace('requires = { chloride-precipitation = "positive" }',
                              'requires = { acidification = "positive" }', 1)
    with pytest.raises(TubevisionInputError, match=r"requires 'acidification', which is not an earlier step"):
        parse_scheme(bad, where="g1.toml")


def test_analyte_without_rules_is_refused():
    cut = GROUP1_TEXT[:GROUP1_TEXT.rindex("[[calls]]")]
    with pytest.raises(TubevisionInputError, match=r"no rules decide Hg2\^2\+"):
        parse_scheme(cut, where="g1.toml")


def test_unknown_name_and_missing_file():
    with pytest.raises(TubevisionInputError, match=r"no built-in scheme 'group9' \(built-in: anions, .*group1"):
        load_scheme("group9")
    with pytest.raises(TubevisionInputError, match=r"file nowhere/s.toml not found"):
        load_scheme("nowhere/s.toml")


def test_user_written_scheme_file(tmp_path):
    # An invented bench scheme: starch-iodine check of a water-treatment sample.
    text = '''
format = "tubevision.scheme/1"
[scheme]
name = "starch-check"
title = "Invented demo scheme"
analytes = ["X"]
source = "invented for a test"
[roles]
control = ["ref+"]
[[steps]]
name = "look"
reagent = "demo reagent"
fraction = "solution"
source = "invented for a test"
hazards = ["none known; follow the SDS"]
positive.meaning = "blue: X present"
positive.liquid_colours = ["blue", "violet"]
negative.meaning = "colourless: X absent"
negative.liquid_colours = ["colourless"]
[[calls]]
analyte = "X"
rules = [{ when = { look = "positive" }, call = "present", reason = "blue" },
         { when = { look = "negative" }, call = "absent", reason = "colourless" }]
'''
    p = tmp_path / "starch.toml"
    p.write_text(text, "utf-8")
    s = load_scheme(p)
    from tubevision.scheme import judge_step, role_of
    from ._group1 import clear

    assert role_of(s, "REF+ 1") == "control" and role_of(s, "blank") == "blank"
    j = judge_step(s, "look", [clear(0, (40.0, 10.0, -50.0), "blue"), clear(1)], {1: "ref+", 2: "S-1"})
    assert [o.verdict for o in j.outcomes] == ["positive", "negative"]
    assert j.record_block()["source"] == str(p)
