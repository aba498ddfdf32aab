"""Independent computation of the solver's results with general-purpose libraries.

Reads a JSON problem written by the Rust test (projected correspondence sets), computes
  * the DLT projection matrix of each set with numpy.linalg.svd (Hartley-normalised, the
    right singular vector of the smallest singular value), and
  * the least-squares calibration with scipy.optimize.least_squares (method "lm",
    MINPACK's Levenberg-Marquardt, complex-step Jacobian so that the minimum is found to
    machine precision rather than to the accuracy of finite differences) on the same model: pinhole, Brown-Conrady k1, k2
    (x_d = x (1 + k1 r^2 + k2 r^4)), fx, fy, cx, cy free, one axis-angle pose per view,
and prints the results as JSON on standard output.

Usage: python crosscheck.py PROBLEM.json
"""

import json
import sys

import numpy as np
from scipy.optimize import least_squares
from scipy.spatial.transform import Rotation


def normaliser(points):
    """Hartley's similarity: centroid to the origin, mean distance sqrt(d)."""
    p = np.asarray(points, dtype=float)
    c = p.mean(axis=0)
    mean = np.linalg.norm(p - c, axis=1).mean()
    d = p.shape[1]
    s = np.sqrt(d) / mean
    t = np.eye(d + 1) * s
    t[d, d] = 1.0
    t[:d, d] = -s * c
    return t


def dlt(xyz, uv):
    t3 = normaliser(xyz)
    t2 = normaliser(uv)
    xh = (t3 @ np.c_[xyz, np.ones(len(xyz))].T).T
    uh = (t2 @ np.c_[uv, np.ones(len(uv))].T).T
    rows = []
    for x, u in zip(xh, uh):
        rows.append(np.r_[x, np.zeros(4), -u[0] * x])
        rows.append(np.r_[np.zeros(4), x, -u[1] * x])
    _, _, vt = np.linalg.svd(np.asarray(rows))
    pn = vt[-1].reshape(3, 4)
    p = np.linalg.inv(t2) @ pn @ t3
    if np.linalg.det(p[:, :3]) < 0:
        p = -p
    return p / np.linalg.norm(p)


def rodrigues(w):
    """R = I + sin(a)/a K + (1 - cos(a))/a^2 K^2, K = [w]x, a = |w| (Rodrigues' formula,
    common practice), written with complex-analytic operations only so that the complex-step
    derivative applies."""
    a = np.sqrt(w[0] * w[0] + w[1] * w[1] + w[2] * w[2])
    k = np.array([[0, -w[2], w[1]], [w[2], 0, -w[0]], [-w[1], w[0], 0]], dtype=w.dtype)
    return np.eye(3) + np.sin(a) / a * k + (1 - np.cos(a)) / (a * a) * (k @ k)


def project(params, rvec, t, xyz):
    fx, fy, cx, cy, k1, k2 = params
    pc = xyz @ rodrigues(rvec).T + t
    x = pc[:, 0] / pc[:, 2]
    y = pc[:, 1] / pc[:, 2]
    r2 = x * x + y * y
    a = 1.0 + k1 * r2 + k2 * r2 * r2
    return np.c_[fx * x * a + cx, fy * y * a + cy]


def refine(problem):
    views = problem["views"]
    x0 = list(problem["start"]["camera"])
    for pose in problem["start"]["poses"]:
        x0 += list(pose["rotation"]) + list(pose["translation"])
    data = [(np.asarray(v["target"], float), np.asarray(v["image"], float)) for v in views]
    # The start must match scipy's own rotation convention.
    for pose in problem["start"]["poses"]:
        assert np.allclose(Rotation.from_rotvec(pose["rotation"]).as_matrix(),
                           rodrigues(np.asarray(pose["rotation"], float)), atol=1e-12)

    def residuals(x):
        out = []
        for k, (xyz, uv) in enumerate(data):
            o = 6 + 6 * k
            out.append((uv - project(x[:6], x[o : o + 3], x[o + 3 : o + 6], xyz)).ravel())
        return np.concatenate(out)

    res = least_squares(
        residuals, np.asarray(x0), method="lm", jac="cs", xtol=1e-15, ftol=1e-15, gtol=1e-15,
        x_scale="jac", max_nfev=20000,
    )
    r = res.fun
    m, n = len(r), len(res.x)
    sigma2 = r @ r / (m - n)
    cov = np.linalg.inv(res.jac.T @ res.jac) * sigma2
    return {
        "camera": res.x[:6].tolist(),
        "std_dev": np.sqrt(np.diag(cov)[:6]).tolist(),
        "cost": 0.5 * float(r @ r),
        "status": int(res.status),
    }


def main():
    problem = json.load(open(sys.argv[1]))
    out = {
        "numpy": np.__version__,
        "dlt": [
            dlt(np.asarray(s["target"], float), np.asarray(s["image"], float)).ravel().tolist()
            for s in problem["dlt"]
        ],
        "refine": refine(problem["refine"]),
    }
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
