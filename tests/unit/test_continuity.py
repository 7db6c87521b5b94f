"""Jump detection along a walk (pure functions)."""

import numpy as np

from pesflow.analysis.continuity import segment, suspect_points


def morse(r, d_e=0.225, a=2.2266, r_e=0.9168):
    # Hydrogen-fluoride-like Morse parameters (D_e 6.1 eV, r_e 0.9168 A: Huber & Herzberg
    # 1979, values from memory); only the shape matters here.
    return d_e * (1 - np.exp(-a * (r - r_e))) ** 2 - 100.0


def test_smooth_curves_are_not_flagged_even_near_the_repulsive_wall():
    r = np.arange(0.65, 2.5, 0.05)
    assert suspect_points(morse(r)) == []
    # a UHF-like <S^2> that rises smoothly as the bond stretches is not a jump
    s2 = 0.75 + 0.7 / (1 + np.exp(-(r - 1.4) / 0.08))
    assert suspect_points(morse(r), s2) == []


def test_energy_jump_is_found_and_segment_covers_it():
    r = np.arange(0.65, 2.5, 0.05)
    e = morse(r)
    e[20:] += 2e-3  # another SCF solution from point 20 on
    flagged = suspect_points(e)
    assert 19 in flagged and 20 in flagged
    lo, hi = segment(flagged, len(e))
    assert lo <= 18 and hi >= 21


def test_single_outlier_point_is_found():
    r = np.arange(0.65, 2.0, 0.05)
    e = morse(r)
    e[12] += 1e-3
    assert 12 in suspect_points(e)


def test_abrupt_s2_change_is_found():
    r = np.arange(0.7, 1.6, 0.05)
    s2 = np.full(len(r), 0.75)
    s2[9:] = 1.2
    assert suspect_points(morse(r), s2) == [8, 9]
