"""The scripted general-purpose peer of BENCHMARKS.md, "Refit against a
scripted loop": residual-bootstrap refits of the n = 200 two-component decay
a1*exp(-k1*t) + a2*exp(-k2*t) (the data of `examples/scaling_study.rs`,
read from its CSV) with SciPy's least_squares and an analytic Jacobian,
warm-started from the base fit, one process, one thread.

    pip install numpy scipy
    cargo run --release --example scaling_study -- 200 /tmp/scale
    OPENBLAS_NUM_THREADS=1 python3 benches/peer/scripted_refit.py /tmp/scale/decay_200.csv 2000

Prints the on-CPU microseconds per refit (process time) for the 'lm'
(MINPACK) and 'trf' methods.
Not part of the test suite (it needs SciPy).
"""
import sys
import time

import numpy as np
from scipy.optimize import least_squares


def main():
    path, reps = sys.argv[1], int(sys.argv[2])
    data = np.loadtxt(path, delimiter=",", skiprows=1)
    t, y = data[:, 0], data[:, 1]
    sigma = 0.01

    def resid(p, yy):
        return (p[0] * np.exp(-p[1] * t) + p[2] * np.exp(-p[3] * t) - yy) / sigma

    def jac(p, yy):
        e1 = np.exp(-p[1] * t)
        e2 = np.exp(-p[3] * t)
        return np.column_stack([e1, -p[0] * t * e1, e2, -p[2] * t * e2]) / sigma

    start = np.array([2.16, 1.404, 0.864, 0.216])
    base = least_squares(resid, start, jac=jac, args=(y,), method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
    a_hat = base.x
    fitted = a_hat[0] * np.exp(-a_hat[1] * t) + a_hat[2] * np.exp(-a_hat[3] * t)
    r = (y - fitted) / sigma
    rng = np.random.default_rng(1)
    draws = [fitted + sigma * rng.choice(r - r.mean(), size=t.size) for _ in range(reps)]
    for method in ["lm", "trf"]:
        t0 = time.process_time()
        for yy in draws:
            least_squares(resid, a_hat, jac=jac, args=(yy,), method=method)
        dt = time.process_time() - t0
        print(f"scipy least_squares method={method}: {1e6 * dt / reps:.1f} us per refit ({reps} refits)")


if __name__ == "__main__":
    main()
