"""The segment model against the published statement.

Source for every check here: Cerqueira MD et al. Standardized myocardial segmentation and
nomenclature for tomographic imaging of the heart. Circulation 2002;105:539-542 (AHA),
its Figures 1-2 and text.
"""

import pytest

from cohort.domain.segments import AHA16, AHA17, RINGS, SEGMENTS, segment_model

# Cerqueira et al. 2002, the 17 names in the statement's order.
PUBLISHED_NAMES = {
    1: "basal anterior", 2: "basal anteroseptal", 3: "basal inferoseptal",
    4: "basal inferior", 5: "basal inferolateral", 6: "basal anterolateral",
    7: "mid anterior", 8: "mid anteroseptal", 9: "mid inferoseptal",
    10: "mid inferior", 11: "mid inferolateral", 12: "mid anterolateral",
    13: "apical anterior", 14: "apical septal", 15: "apical inferior", 16: "apical lateral",
    17: "apex",
}  # fmt: skip


def test_names_match_cerqueira_2002():
    # Cerqueira et al. 2002, segment nomenclature
    assert {n: s.name for n, s in SEGMENTS.items()} == PUBLISHED_NAMES


def test_rings_match_cerqueira_2002():
    # Cerqueira et al. 2002: basal 1-6, mid 7-12, apical 13-16, apex 17
    for n, s in SEGMENTS.items():
        expected = "basal" if n <= 6 else "mid" if n <= 12 else "apical" if n <= 16 else "apex"
        assert s.ring == expected
    assert RINGS == ("basal", "mid", "apical", "apex")


def test_territories_match_cerqueira_2002():
    # Cerqueira et al. 2002, recommended coronary territory assignment (Figure 2)
    expected = {
        "LAD": {1, 2, 7, 8, 13, 14, 17},
        "RCA": {3, 4, 9, 10, 15},
        "LCx": {5, 6, 11, 12, 16},
    }
    for territory, numbers in expected.items():
        assert {n for n, s in SEGMENTS.items() if s.territory == territory} == numbers


def test_angles_follow_the_bullseye_orientation():
    # Cerqueira et al. 2002 bullseye: segment 1 at the top, counter-clockwise numbering,
    # septum on the viewer's left (90-270 deg in math convention), lateral on the right.
    assert SEGMENTS[1].centre_deg == 90.0 and SEGMENTS[7].centre_deg == 90.0
    assert SEGMENTS[13].centre_deg == 90.0
    for n in (2, 3, 8, 9, 14):  # septal segments
        assert 90.0 < SEGMENTS[n].centre_deg < 270.0 or SEGMENTS[n].centre_deg == 180.0
    for n in (5, 6, 11, 12, 16):  # lateral segments
        c = SEGMENTS[n].centre_deg
        assert c < 90.0 or c > 270.0
    assert SEGMENTS[4].centre_deg == 270.0 and SEGMENTS[15].centre_deg == 270.0
    assert {SEGMENTS[n].width_deg for n in range(1, 13)} == {60.0}
    assert {SEGMENTS[n].width_deg for n in range(13, 17)} == {90.0}
    # each ring tiles the full circle without overlap
    for ring in ("basal", "mid", "apical"):
        members = [s for s in SEGMENTS.values() if s.ring == ring]
        assert sum(s.width_deg for s in members) == 360.0
        assert len({s.centre_deg for s in members}) == len(members)


def test_sixteen_segment_variant_has_no_apex():
    # Cerqueira et al. 2002 / Lang et al. 2015 (memory): 16-segment model omits the apex
    assert AHA17.numbers == tuple(range(1, 18))
    assert AHA16.numbers == tuple(range(1, 17))
    assert 17 not in AHA16 and 17 in AHA17
    assert AHA16.rings == ("basal", "mid", "apical")
    frame = AHA17.to_frame()
    assert list(frame["segment"]) == list(range(1, 18))
    assert frame.loc[frame.segment == 14, "short_name"].item() == "aS"


def test_unknown_model_is_refused():
    with pytest.raises(ValueError, match="segment model must be one of"):
        segment_model("aha18")
