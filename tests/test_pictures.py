"""Pictures of every catalog entry: a non-empty image whose drawn projections lie in the set."""
from pathlib import Path

import numpy as np
import pytest

import setkit
from setkit import cli

pytest.importorskip("matplotlib")
from setkit.pictures import draw  # noqa: E402

CATALOG = sorted((Path(__file__).resolve().parent.parent / "catalog").glob("*.yaml"))


@pytest.mark.parametrize("path", CATALOG, ids=[p.stem for p in CATALOG])
def test_every_catalog_entry_draws_with_projections_on_the_set(path, tmp_path):
    K = setkit.load(str(path))
    fig = draw(K, points=3, n_directions=24, measure="directions")
    out = tmp_path / f"{path.stem}.png"
    fig.savefig(out, dpi=40)
    import matplotlib.image as mpimg
    img = mpimg.imread(out)
    assert img.shape[0] > 50 and img.shape[1] > 50
    # not empty: many distinct colours (a blank canvas has one), and some pixels far from white
    rgb = img[..., :3].reshape(-1, 3)
    assert len(np.unique(np.round(rgb, 2), axis=0)) > 10
    assert (rgb.sum(axis=1) < 2.0).mean() > 0.01
    d = fig.setkit_drawing
    P = np.array(d["projections"]).reshape((-1,) + tuple(K.shape))
    assert np.all(K.contains(P)), f"{path.stem}: a drawn projection is not in the set"
    # the arrows start at the samples and end at the projections, in the drawn coordinates
    i, j = d["axes"]
    Y = np.array(d["samples"])
    assert Y.shape == (3, K.dim) and np.array(d["boundary"]).shape == (24, 2)
    # each projection is the nearest point: no boundary extreme point of a 2-D set is nearer
    if K.dim == 2:
        B = np.array(d["boundary"])
        Pf = P.reshape(3, 2)
        for y, p in zip(Y, Pf):
            assert np.linalg.norm(y - p) <= np.min(np.linalg.norm(B - y, axis=1)) + 1e-7


def test_draw_of_a_square_matches_the_closed_form(tmp_path):
    # the unit box [0,1]^2: the LMO at c = (1, 0.45) is the vertex (0, 0) (signs of c), the boundary
    # has the 4 corners as its extreme points and projection is clipping (closed forms)
    K = setkit.box(lower=[0, 0], upper=[1, 1])
    fig = draw(K, points=4, n_directions=16)
    d = fig.setkit_drawing
    assert d["lmo"] == [0.0, 0.0]
    assert d["centroid"] == pytest.approx([0.5, 0.5])
    corners = {tuple(np.round(b, 9)) for b in d["boundary"]}
    assert corners == {(0.0, 0.0), (1.0, 0.0), (0.0, 1.0), (1.0, 1.0)}
    Y = np.array(d["samples"])
    assert np.allclose(d["projections"], np.clip(Y, 0, 1))


def test_draw_command_png_svg_and_bad_arguments(tmp_path, capsys):
    png, svg = tmp_path / "s.png", tmp_path / "s.svg"
    assert cli.main(["draw", "starter-simplex", "--out", str(png), "--quiet", "--measure", "directions"]) == 0
    assert png.stat().st_size > 2000 and png.read_bytes()[:4] == b"\x89PNG"
    assert cli.main(["--quiet", "draw", "starter-simplex", "--out", str(svg), "--axes", "2,4"]) == 0
    assert "<svg" in svg.read_text()[:400]
    capsys.readouterr()
    for bad in (["--out", str(tmp_path / "x.gif")], ["--out", str(tmp_path / "no" / "x.png")],
                ["--out", str(png), "--axes", "0,9"], ["--out", str(png), "--points", "0"]):
        assert cli.main(["draw", "starter-simplex", "--quiet"] + bad) == 2, bad
        err = capsys.readouterr().err
        assert err.startswith("setkit: ") and err.count("\n") == 1, (bad, err)


def test_slice_of_a_ball_is_the_disc_of_pythagoras():
    # the unit l2 ball in R^3 cut by the plane x[2] = 0.6 is the disc of radius sqrt(1 - 0.36) = 0.8
    # around (0, 0) (Pythagoras); projections onto the slice are radial (closed form)
    K = setkit.ball(radius=1.0, dim=3)
    fig = draw(K, at=[0.0, 0.0, 0.6], mode="slice", points=5, n_directions=32)
    d = fig.setkit_drawing
    assert d["mode"] == "slice" and not d["unbounded"]
    B = np.array(d["boundary"])
    assert np.allclose(np.hypot(B[:, 0], B[:, 1]), 0.8, atol=1e-6)
    assert np.allclose(d["centroid"], [0.0, 0.0], atol=1e-6)
    Y, P = np.array(d["samples"]), np.array(d["projections"])
    assert np.allclose(Y[:, 2], 0.6) and np.allclose(P[:, 2], 0.6, atol=1e-6)
    r = np.hypot(Y[:, 0], Y[:, 1])
    expect = Y[:, :2] * np.minimum(1.0, 0.8 / r)[:, None]
    assert np.allclose(P[:, :2], expect, atol=1e-5)


def test_slice_of_a_cube_and_of_a_ranking_set(tmp_path):
    # [0,1]^3 cut at x[2] = 0.3 is the unit square: the traced boundary reaches the square's edges
    K = setkit.box(lower=[0, 0, 0], upper=[1, 1, 1])
    d = draw(K, at=[0.5, 0.5, 0.3], mode="slice", points=3, n_directions=16).setkit_drawing
    B = np.array(d["boundary"])
    assert np.allclose(np.max(np.abs(B - 0.5), axis=1), 0.5, atol=1e-7)
    assert d["lmo"] == [0.0, 0.0]          # argmin of <c, x> with c > 0: the lower corner
    # a permutahedron slice through a point of the set: projections lie in the set and keep the cut
    P4 = setkit.permutahedron(weights=[4, 3, 2, 1])
    at = np.array([2.5, 2.5, 3.0, 2.0])
    fig = draw(P4, at=at, mode="slice", axes=(0, 1), points=4, n_directions=24)
    d = fig.setkit_drawing
    proj = np.array(d["projections"])
    assert np.all(P4.contains(proj)) and np.allclose(proj[:, 2:], at[2:], atol=1e-6)
    # the slice is the segment x0 + x1 = 5 with 1 <= x0 <= 4: the traced points keep the sum
    B = np.array(d["boundary"])
    assert np.allclose(B.sum(axis=1), 5.0, atol=1e-6) and B[:, 0].min() >= 1 - 1e-6 and B[:, 0].max() <= 4 + 1e-6
    out = tmp_path / "slice.png"
    assert cli.main(["--quiet", "draw", "starter-simplex", "--mode", "slice", "--out", str(out)]) == 0
    assert out.stat().st_size > 2000
