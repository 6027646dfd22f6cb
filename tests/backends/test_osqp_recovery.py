import numpy as np

import setkit


def test_stalled_warm_start_is_restarted_cold():
    # a sequence of points at very different scales: OSQP's adapted rho from the small points once
    # stalled ADMM at the large ones (maximum iterations, wrong point); the backend must recover
    K = setkit.compile({"kind": "polyhedron", "A": [[1, 1], [-1, 2]], "b": [1, 2], "lower": [-1, -1],
                        "upper": [3, 3]}).with_backends(project="osqp")
    seq = np.array([[1.0420853057173853, -0.999999999995802], [-0.9999999992724635, -0.9999999999983341],
                    [1.0440740855836268, -0.9998569124939349], [-1.0067325808408716, -0.9981403070704082],
                    [1.0420853059812931, -7.01356846786825], [-1.0165734988953614, -2.0492664579505857],
                    [-3847.960526171212, -866.4795143868031], [-5175.835330830173, 1822.3478686059589]])
    det = K.project(seq, details=True)
    assert all(s == "solved" for s in det.status)
    # worked by hand: far to the lower left, the nearest point is the corner (-1, -1) of the box
    np.testing.assert_allclose(det.point[6], [-1.0, -1.0], atol=1e-9)
    # (-5175.8, 1822.3): the constraint -x1 + 2 x2 <= 2 with x1 >= -1 gives the corner (-1, 0.5)
    np.testing.assert_allclose(det.point[7], [-1.0, 0.5], atol=1e-9)
    assert np.all(det.residual <= 1e-9)
