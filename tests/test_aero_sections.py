"""Section geometry: NACA 4-digit equations and coordinate files."""
from __future__ import annotations

import numpy as np
import pytest

from doe.aero.panels import signed_area
from doe.aero.sections import _camber_line, naca4, parse_naca, read_coords, repanel
from doe.errors import AeroError


def test_naca_thickness_and_position():
    # Abbott & von Doenhoff 1959, §6.4: a 4-digit section's thickness t is reached at x/c = 0.30
    s = naca4(0.0, 0.0, 0.12, n_panels=400)
    upper = s.y[s.n_panels // 2:]
    x = s.x[s.n_panels // 2:]
    i = int(np.argmax(upper))
    # 400 panels: nodes are ~0.4 % chord apart near x = 0.3; the thickness peak is flat, so 1e-4 chords
    assert 2 * upper[i] == pytest.approx(0.12, abs=1e-4)
    assert x[i] == pytest.approx(0.30, abs=0.02)


def test_naca_mean_line_published_form():
    # Abbott & von Doenhoff 1959, §6.4: mean line peaks at (p, m) with zero slope there, passes (0,0) and (1,0)
    x = np.array([0.0, 0.4, 1.0])
    yc, dyc = _camber_line(x, 0.02, 0.4)
    np.testing.assert_allclose(yc, [0.0, 0.02, 0.0], atol=1e-15)
    assert dyc[1] == pytest.approx(0.0, abs=1e-15)


def test_trailing_edge_gap_from_published_coefficients():
    # Abbott & von Doenhoff 1959, §6.4: with a4 = -0.1015 the half-thickness at x = 1 is
    # 5 t (0.2969 - 0.1260 - 0.3516 + 0.2843 - 0.1015) (computed); -0.1036 closes it
    t = 0.12
    gap = 2 * 5 * t * (0.2969 - 0.1260 - 0.3516 + 0.2843 - 0.1015)
    assert naca4(0.0, 0.0, t, closed_te=False).te_gap == pytest.approx(gap, rel=1e-9)
    assert naca4(0.0, 0.0, t).te_gap == 0.0


def test_ordering_is_clockwise_from_the_trailing_edge():
    s = naca4(0.04, 0.4, 0.12)
    assert s.x[0] == s.x[-1] == 1.0
    assert s.y[1] < 0 < s.y[-2]                      # lower surface first
    assert signed_area(s.points[None])[0] < 0


def test_parse_naca():
    assert parse_naca("NACA 4412") == (0.04, 0.4, 0.12)
    for bad in ("441", "44a2", "4012", "0412"):
        with pytest.raises(AeroError):
            parse_naca(bad)


def _write(path, pts, header="test section"):
    path.write_text(header + "\n" + "\n".join(f"{x:.8f} {y:.8f}" for x, y in pts) + "\n")
    return path


def test_coordinate_file_round_trip(tmp_path):
    # a file's chord is the longest line from the trailing edge; for a 2412 with plain cosine spacing that
    # ends at the NACA leading edge node (denser leading-edge spacing puts a node a hair further away)
    ref = naca4(0.02, 0.4, 0.12, n_panels=160, le_stretch=1.0)
    selig = ref.points[::-1]                          # upper TE -> LE -> lower TE, the common file order
    got = read_coords(_write(tmp_path / "s.dat", selig), n_panels=None)
    assert got.name == "test section"
    np.testing.assert_allclose(got.points, ref.points, atol=1e-7)   # 8 printed decimals
    assert got.thickness == pytest.approx(0.12, abs=1e-3)


def test_scaled_and_rotated_file_is_normalised(tmp_path):
    ref = naca4(0.02, 0.4, 0.12, n_panels=120)
    a = np.radians(7.0)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    pts = 0.3 * ref.points @ rot.T + [2.0, 1.0]
    got = read_coords(_write(tmp_path / "s.txt", pts), n_panels=None)
    np.testing.assert_allclose(got.points, ref.points, atol=1e-7)


def test_rejects_unclosed_contour(tmp_path):
    pts = naca4(0.0, 0.0, 0.12, n_panels=80).points[:-12]
    with pytest.raises(AeroError, match="not closed"):
        read_coords(_write(tmp_path / "u.dat", pts))


def test_rejects_badly_ordered_contour(tmp_path):
    s = naca4(0.0, 0.0, 0.12, n_panels=80)
    half = s.n_panels // 2
    upper = s.points[half:]                           # LE -> TE
    lower = s.points[:half + 1][::-1]                 # LE -> TE (two blocks, both from the LE)
    with pytest.raises(AeroError, match="badly ordered"):
        read_coords(_write(tmp_path / "b.dat", np.vstack([upper, lower])))


def test_rejects_self_intersecting_contour(tmp_path):
    pts = naca4(0.0, 0.0, 0.12, n_panels=80).points.copy()
    pts[10:20, 1] *= -3.0                             # push part of the lower surface through the upper one
    with pytest.raises(AeroError, match="crosses itself"):
        read_coords(_write(tmp_path / "x.dat", pts), n_panels=None)


def test_rejects_bad_line(tmp_path):
    path = tmp_path / "bad.dat"
    path.write_text("name\n1 0\n0.5 x\n")
    with pytest.raises(AeroError, match=r"bad.dat:3"):
        read_coords(path)


def test_repanel_keeps_the_shape():
    s = naca4(0.04, 0.4, 0.12, n_panels=200)
    r = repanel(s, 100)
    # nodes of the re-panelled section lie on the original contour: compare with the analytic thickness
    assert r.n_panels == 100
    assert np.max(np.abs(r.y)) == pytest.approx(np.max(np.abs(s.y)), abs=2e-4)
