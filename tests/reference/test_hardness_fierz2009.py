"""Hand-hardness index and notation.

SOURCE: Fierz, C. et al. (2009). The International Classification for Seasonal Snow on the
Ground. IHP-VII Technical Documents in Hydrology No. 83, UNESCO-IHP, Paris -- hand-hardness
index table (F 1, 4F 2, 1F 3, P 4, K 5, I 6) [src]; intermediate steps written
"4F-1F" between adjacent terms. The one-third step of the "+"/"-" modifiers is our own
documented convention (the classification gives the signs no number).
"""

import math
import re

import pytest

from regionmap.errors import InputError
from regionmap.snow.hardness import hardness_label, parse_hand_hardness

# Fierz et al. (2009), hand-hardness index table [src].
FIERZ2009_INDEX = {"F": 1, "4F": 2, "1F": 3, "P": 4, "K": 5, "I": 6}


@pytest.mark.parametrize("label,index", FIERZ2009_INDEX.items())
def test_hand_hardness_index_table_fierz2009(label, index):
    assert parse_hand_hardness(label) == index  # Fierz et al. 2009 table [src]
    assert hardness_label(index) == label  # and back


@pytest.mark.parametrize(
    "text,expected",
    [
        ("F-4F", 1.5),  # Fierz et al. 2009: intermediate step between adjacent terms
        ("4F-1F", 2.5),
        ("1F-P", 3.5),
        ("P-K", 4.5),
        ("K-I", 5.5),
        ("1F-4F", 2.5),  # written in the other order: same step
        (" 4f-1f ", 2.5),  # blanks and lower case tolerated
    ],
)
def test_intermediate_step_half_way_fierz2009(text, expected):
    assert parse_hand_hardness(text) == expected


@pytest.mark.parametrize(
    "text,expected",
    [
        ("1F+", 3 + 1 / 3),  # our convention: '+' = one third of a step harder
        ("P-", 4 - 1 / 3),  # '-' = one third of a step softer
        ("F-", 1 - 1 / 3),
        ("I+", 6 + 1 / 3),
        ("4F+", 2 + 1 / 3),
    ],
)
def test_plus_minus_modifier_third_step(text, expected):
    assert math.isclose(parse_hand_hardness(text), expected, rel_tol=0, abs_tol=1e-15)


def test_modifiers_keep_order_between_steps():
    # A '+' label lies between the label and the next intermediate step (Fierz et al. 2009
    # order of the scale F < 4F < 1F < P < K < I), whatever the numeric convention.
    seq = [
        "F",
        "F+",
        "F-4F",
        "4F-",
        "4F",
        "4F+",
        "4F-1F",
        "1F-",
        "1F",
        "1F+",
        "1F-P",
        "P-",
        "P",
        "P+",
        "P-K",
        "K-",
        "K",
        "K+",
        "K-I",
        "I-",
        "I",
    ]
    values = [parse_hand_hardness(t) for t in seq]
    assert values == sorted(values)
    assert len(set(values)) == len(values)


@pytest.mark.parametrize("bad", ["", "X", "2F", "F++", "F-P", "K-F", "P -", "hard", "1F+-"])
def test_bad_hardness_notation_names_value(bad):
    with pytest.raises(InputError, match=re.escape(f"got {bad!r}")):
        parse_hand_hardness(bad, where="profile.csv layer 3")


def test_bad_hardness_notation_names_where():
    with pytest.raises(InputError, match="profile.csv layer 3"):
        parse_hand_hardness("Q", where="profile.csv layer 3")


def test_non_string_hardness_rejected():
    with pytest.raises(InputError, match="got 3 of type int"):
        parse_hand_hardness(3)


@pytest.mark.parametrize(
    "index,label",
    [
        (0.2, "F"),
        (1.4, "F"),
        (1.5, "4F"),
        (2.9, "1F"),
        (3.34, "1F"),
        (4.6, "K"),
        (5.5, "I"),
        (7.0, "I"),
    ],
)
def test_hardness_label_nearest_fierz2009(index, label):
    assert hardness_label(index) == label  # nearest term of the Fierz et al. 2009 scale


def test_hardness_label_rejects_nan():
    with pytest.raises(InputError, match="NaN"):
        hardness_label(float("nan"))
