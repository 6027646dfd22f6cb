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
