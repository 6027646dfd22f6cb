"""DecisionSet: dispatch and routes, batching, input errors, details, with_backends, pickling."""
import pickle
import threading

import numpy as np
import pytest

import setkit
from setkit.errors import BackendUnavailableError, InputError, SetkitError, UnsupportedOperationError

SETS = [
    {"kind": "simplex", "dim": 4},
    {"kind": "budget", "dim": 4, "total": 1.0, "upper": 0.4, "weights": [1, 2, 1, 1]},
    {"kind": "ball", "dim": 4, "norm": 1, "radius": 2.0},
    {"kind": "permutahedron", "weights": [3, 2, 2, 0]},
    {"kind": "box", "dim": 4, "lower": -1, "upper": 1},
]


@pytest.mark.parametrize("spec", SETS, ids=lambda s: s["kind"])
def test_batching_follows_the_gufunc_rule(spec, rng):
    K = setkit.compile(spec)
    y = rng.standard_normal(4) * 3
    Y = rng.standard_normal((2, 3, 4)) * 3
    assert K.project(y).shape == (4,)
    assert K.project(Y).shape == (2, 3, 4)
    np.testing.assert_array_equal(K.project(Y)[1, 0], K.project(Y[1, 0]))
    np.testing.assert_array_equal(K.lmo(Y)[0, 2], K.lmo(Y[0, 2]))
    d = K.distance(y)
    assert np.ndim(d) == 0 and isinstance(d, float)
    assert K.distance(Y).shape == (2, 3) and K.support(Y).shape == (2, 3)
    assert K.contains(Y).dtype == bool and K.contains(Y).shape == (2, 3)
    assert K.project([y.tolist()]).shape == (1, 4)              # lists work, a batch of one stays a batch
    assert K.project(Y).dtype == np.float64
    assert K.project(np.zeros((0, 4))).shape == (0, 4)          # an empty batch


@pytest.mark.parametrize("spec", SETS, ids=lambda s: s["kind"])
def test_bad_inputs_are_clear(spec):
    K = setkit.compile(spec)
    with pytest.raises(InputError, match=r"project on .*: argument y must be finite; got nan at index \(1,\)"):
        K.project([0.0, np.nan, 0.0, 0.0])
    with pytest.raises(InputError, match=r"lmo on .*: argument c must be finite; got inf at index \(0, 2\)"):
        K.lmo([[0.0, 0.0, np.inf, 0.0]])
    with pytest.raises(InputError, match=r"trailing shape \(4,\) .*; got shape \(3,\)"):
        K.project([1.0, 2.0, 3.0])
    with pytest.raises(InputError, match=r"got shape \(4, 3\)"):
        K.support(np.zeros((4, 3)))
    with pytest.raises(InputError, match="must be numeric"):
        K.distance(["a", "b", "c", "d"])
    with pytest.raises(InputError, match="tol must be a finite number >= 0"):
        K.contains(np.zeros(4), tol=-1.0)
    with pytest.raises(InputError, match="x must be a cvxpy expression of shape"):
        import cvxpy as cp
        K.to_cvxpy(cp.Variable(3))
    with pytest.raises(SetkitError):
        K.project(None)


def test_details_record(rng):
    K = setkit.compile(SETS[1])
    Y = rng.standard_normal((5, 4)) * 2
    d = K.project(Y, details=True)
    np.testing.assert_array_equal(d.point, K.project(Y))
    assert d.route == "native" and d.status.shape == (5,) and all(s == "solved" for s in d.status)
    assert d.certificate.shape == (5,) and np.all(np.abs(d.certificate) <= 1e-12)
    assert np.all(d.residual <= 1e-14) and d.seconds >= 0
    one = K.project(Y[0], details=True)
    assert np.ndim(one.certificate) == 0 and one.point.shape == (4,)
    L = K.lmo(Y, details=True)
    assert np.all(np.isnan(L.certificate)) and np.all(L.residual <= 1e-14)
    with pytest.raises(Exception):
        d.point = None                                          # frozen


def test_routes_and_explain():
    K = setkit.compile(SETS[3])
    r = K.routes()
    assert r["project"].provider == "native" and r["lmo"].provider == "native"
    assert r["distance"].provider == "derived" and r["contains"].provider == "native"
    text = K.explain()
    assert "pool-adjacent-violators" in text and "rearrangement" in text.lower()
    Kb = setkit.compile(SETS[2])
    assert "simplex projection of |y - c|" in Kb.explain()


def test_with_backends_swaps_and_validates(rng):
    K = setkit.compile(SETS[1])
    Y = rng.standard_normal((3, 4))
    R = K.with_backends(project="reference", lmo="highs")
    assert R.routes()["project"].provider == "reference" and R.routes()["lmo"].provider == "highs"
    assert "chosen by the caller" in R.routes()["project"].reason
    np.testing.assert_allclose(R.project(Y), K.project(Y), atol=1e-6)
    back = R.with_backends(project=None, lmo="native")
    assert back.routes()["project"].provider == "native" and back.routes()["lmo"].provider == "native"
    with pytest.raises(BackendUnavailableError, match="backend 'nope' is unknown"):
        K.with_backends(project="nope")
    with pytest.raises(BackendUnavailableError, match="does not serve lmo"):
        K.with_backends(lmo="osqp")
    with pytest.raises(UnsupportedOperationError, match="unknown operator 'projekt'"):
        K.with_backends(projekt="native")
    with pytest.raises(BackendUnavailableError, match="has no native kernel for distance"):
        K.with_backends(distance="native")
    P = setkit.compile(SETS[3])                                 # the permutahedron has no linear form
    with pytest.raises(BackendUnavailableError, match="has no linear form"):
        P.with_backends(project="osqp")
    with pytest.raises(BackendUnavailableError, match="l2|linear form"):
        setkit.ball(dim=3, radius=1.0).with_backends(lmo="highs")


def test_pickling_keeps_the_set_and_its_choices(rng):
    K = setkit.compile(SETS[1]).with_backends(project="osqp")
    Y = rng.standard_normal((3, 4))
    before = K.project(Y)                                       # builds an OSQP workspace
    K2 = pickle.loads(pickle.dumps(K))
    assert K2.routes()["project"].provider == "osqp"
    np.testing.assert_allclose(K2.project(Y), before, atol=1e-9)
    for spec in SETS:
        A = setkit.compile(spec)
        B = pickle.loads(pickle.dumps(A))
        np.testing.assert_array_equal(A.project(Y * 2), B.project(Y * 2))


def test_threads_get_their_own_workspaces(rng):
    K = setkit.compile(SETS[1]).with_backends(project="osqp")
    Y = rng.standard_normal((6, 4)) * 2
    expected = setkit.compile(SETS[1]).project(Y)
    out, errors = {}, []

    def work(i):
        try:
            out[i] = K.project(Y)
        except Exception as exc:  # pragma: no cover - reported below
            errors.append(exc)

    ts = [threading.Thread(target=work, args=(i,)) for i in range(3)]
    for t in ts:
        t.start()
    for t in ts:
        t.join()
    assert not errors
    for v in out.values():
        np.testing.assert_allclose(v, expected, atol=1e-7)


def test_to_cvxpy_round_trip(rng):
    import cvxpy as cp
    K = setkit.compile(SETS[2])
    x = cp.Variable(4)
    y = rng.standard_normal(4) * 3
    prob = cp.Problem(cp.Minimize(cp.sum_squares(x - y)), K.to_cvxpy(x))
    prob.solve(solver=cp.CLARABEL)
    np.testing.assert_allclose(x.value, K.project(y), atol=1e-6)


def test_compile_and_load_take_loose():
    # loose is an option of the compiled set, not an operator route
    import setkit
    K = setkit.compile({"kind": "simplex", "dim": 3}, loose=True)
    assert K.loose and K.with_backends(loose=False).loose is False
    L = setkit.load("catalog/starter-simplex.yaml", loose=True, project="osqp")
    assert L.loose and L.routes()["project"].provider == "osqp"
