#!/usr/bin/python3
"""Write the reference fixture that tests/test_recon.c checks wt_recon against.

The reference is numpy's own pseudo-inverse (numpy.linalg.pinv) and singular
values (numpy.linalg.svd), so the test compares our LAPACKE-based
reconstructor with an independent implementation.  Run it with Debian's
python (the one that has numpy):

    /usr/bin/python3 tools/gen_pinv_fixture.py [output]

The default output is tests/data/recon/pinv_40x24.txt next to this script's
repository.  The file is plain text:

    # comment lines
    rows M
    cols N
    kept K            modes left after truncation
    rcond X           numpy's cutoff relative to the largest singular value
    sigma             then N ... min(M, N) singular values, descending
    matrix            then M lines of N values (row-major)
    pinv              then N lines of M values: numpy.linalg.pinv(matrix, rcond)
"""

import os
import sys

import numpy as np

SEED = 20240611
ROWS, COLS = 40, 24
KEPT = 17


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    default = os.path.join(here, "..", "tests", "data", "recon",
                           "pinv_40x24.txt")
    out = sys.argv[1] if len(sys.argv) > 1 else default

    rng = np.random.default_rng(SEED)
    # A graded spectrum, as an interaction matrix has: Gaussian entries with
    # columns scaled from 1 down to 1e-3, so the truncation matters.
    a = rng.standard_normal((ROWS, COLS))
    a *= np.logspace(0.0, -3.0, COLS)[np.newaxis, :]

    sigma = np.linalg.svd(a, compute_uv=False)
    # numpy keeps sigma_i > rcond * sigma_1; put rcond midway (geometrically)
    # between the last kept and the first dropped value, so the same count
    # is kept under wt_recon_modes' sigma_i / sigma_1 >= rcond.
    rcond = np.sqrt(sigma[KEPT - 1] * sigma[KEPT]) / sigma[0]
    p = np.linalg.pinv(a, rcond=rcond)
    assert np.sum(sigma > rcond * sigma[0]) == KEPT

    with open(out, "w") as f:
        f.write("# wavetrim recon fixture: reference from numpy.linalg.pinv\n")
        f.write("# written by tools/gen_pinv_fixture.py, numpy %s, seed %d\n"
                % (np.__version__, SEED))
        f.write("rows %d\ncols %d\nkept %d\nrcond %.17g\n"
                % (ROWS, COLS, KEPT, rcond))
        f.write("sigma\n")
        f.write("\n".join("%.17g" % v for v in sigma) + "\n")
        f.write("matrix\n")
        for row in a:
            f.write(" ".join("%.17g" % v for v in row) + "\n")
        f.write("pinv\n")
        for row in p:
            f.write(" ".join("%.17g" % v for v in row) + "\n")


if __name__ == "__main__":
    main()
