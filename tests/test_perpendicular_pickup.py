"""Capacitive pickup of a segment crossing a line is continuous in the crossing angle.

Issue 15: a segment at exactly 90° projects to nothing on the line, and its sections'
share of the segment was 0/0 set to 0, while 89° gave a finite pickup. The share
(corridor.steps.couple.section_share) is now the limit of the projected share as the
angle tends to 90°.
"""

import numpy as np

from corridor.geometry.exposure import Pairs, split_sections
from corridor.steps.couple import section_share


def _pairs(offset_start_m, offset_end_m, projected_m):
    n = len(offset_start_m)
    a = np.asarray(offset_start_m, float)
    b = np.asarray(offset_end_m, float)
    return Pairs(segment=np.arange(n), line=np.zeros(n, int), edge=np.zeros(n, int),
                 separation_m=np.abs(0.5 * (a + b)), min_separation_m=np.minimum(abs(a), abs(b)),
                 offset_start_m=a, offset_end_m=b, offset_mid_m=0.5 * (a + b),
                 angle_deg=np.full(n, 90.0), projected_length_m=np.asarray(projected_m, float),
                 line_position_m=np.zeros(n), exposure_class=np.ones(n, int))


def test_share_at_ninety_degrees_is_the_limit_of_the_oblique_share():
    # one segment from 20 m to 200 m off the line: at 90° and at 90° − 0.001° (projection
    # 180 m·tan(0.001°) = 3 mm); the sections' shares must agree (they sum to 1 either way)
    for start, end in [(20.0, 200.0), (-150.0, 60.0)]:  # away from, and across, the line
        length = abs(end - start)
        tiny = length * np.tan(np.deg2rad(0.001))
        exact = _pairs([start], [end], [0.0])
        near = _pairs([start], [end], [tiny])
        s_exact = section_share(exact, split_sections(exact, 1.0, 3.0))
        s_near = section_share(near, split_sections(near, 1.0, 3.0))
        assert len(s_exact) > 1
        assert s_exact.sum() == np.float64(1.0) or abs(s_exact.sum() - 1) < 1e-12
        # across the line the 1 m separation floor shifts the split slightly (≤ 2·1 m/210 m)
        tol = 1e-9 if start > 0 else 2.0 / length
        np.testing.assert_allclose(s_exact, s_near, atol=tol)
        assert np.all(s_exact > 0)
