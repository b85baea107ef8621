"""parse_labels(): the --labels text (contract: positions count from 1 in reading order)."""

from __future__ import annotations

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.scheme import load_scheme, parse_labels, role_of


def test_contract_example():
    assert parse_labels("1=control,2=unknown A,3=blank", 3) == {1: "control", 2: "unknown A", 3: "blank"}


def test_spaces_and_equals_in_label_and_empty_text():
    assert parse_labels(" 2 = K-7 = repeat , 1=blank ", 2) == {2: "K-7 = repeat", 1: "blank"}
    assert parse_labels("", 5) == {} and parse_labels(None, 0) == {}


@pytest.mark.parametrize("text, n, match", [
    ("1=control,2=unknown A,3=blank,4=K-9", 3, r"^--labels: position 4 given but only 3 tubes found$"),
    ("1=a", 0, "position 1 given but only 0 tubes found"),
    ("1=control,1=blank", 3, "position 1 given twice"),
    ("control,2=blank", 3, r"'control' is not POSITION=LABEL"),
    ("x=control", 3, r"'x=control' is not POSITION=LABEL"),
    ("-1=control", 3, "is not POSITION=LABEL"),
    ("0=control", 3, "positions count from 1"),
    ("1=control,,2=blank", 3, "empty item"),
    ("1=", 3, "position 1 has an empty label"),
])
def test_bad_labels(text, n, match):
    with pytest.raises(TubevisionInputError, match=match):
        parse_labels(text, n)


def test_roles_from_labels():
    s = load_scheme("group1")
    assert role_of(s, "Pos. CONTROL") == "control"
    assert role_of(s, "reagent blank") == "blank"
    assert role_of(s, "negative control") == "blank"  # longest word wins
    assert role_of(s, "unknown A") == "sample"
    assert role_of(s, "  ") is None
    assert role_of(load_scheme("chloride-limit"), "standard 20 ppm") == "standard"
