"""Read a propagator file written by `rlmeson export` with plain h5py (no rlmeson) and
evaluate the dressed quark at a complex p^2 from the stored rational approximant.

    python3 examples/propagator_with_h5py.py propagator_l.nc [RE IM]

Prints A, B and S's scalar and vector parts sigma_S, sigma_V at p^2 = RE + i IM (GeV^2),
which must lie inside the exported region and within the approximant's window.
"""

import sys

import h5py
import numpy as np


def rational(h, f):
    """r(s) = sum_j w_j f_j/(s - s_j) / sum_j w_j/(s - s_j) from the stored arrays."""
    get = lambda name: h[f"aaa_{f}_{name}_re"][()] + 1j * h[f"aaa_{f}_{name}_im"][()]  # noqa: E731
    s_j, f_j, w_j = get("support"), get("values"), get("weights")
    return lambda s: np.sum(w_j * f_j / (s - s_j)) / np.sum(w_j / (s - s_j))


def main(path, p2):
    with h5py.File(path, "r") as h:
        window = h.attrs["approximant_window_gev2"]
        if abs(p2) > window:
            sys.exit(f"|p^2| = {abs(p2):.3g} GeV^2 is outside the approximant's window {window:g} GeV^2")
        # inside the exported parabola: q^2 = Re p^2 + eta^2 M^2 >= (Im p^2)^2 / (4 eta^2 M^2)
        y = (h.attrs["region_eta"] * h.attrs["region_mass_gev"]) ** 2
        if p2.real + y < p2.imag**2 / (4 * y):
            sys.exit(f"p^2 = {p2} lies outside the exported parabola (apex {-y:.4g} GeV^2)")
        a, b = rational(h, "A")(p2), rational(h, "B")(p2)
        print(f"file: flavour {h.attrs['flavour']}, config hash {h.attrs['config_hash']}, "
              f"{h.attrs['regularisation_description']}")
    d = p2 * a * a + b * b
    print(f"p^2 = {p2.real:.6g} {p2.imag:+.6g} i GeV^2")
    print(f"A = {a.real:.12g} {a.imag:+.12g} i")
    print(f"B = {b.real:.12g} {b.imag:+.12g} i GeV")
    print(f"sigma_V = {(a / d).real:.12g} {(a / d).imag:+.12g} i GeV^-2")
    print(f"sigma_S = {(b / d).real:.12g} {(b / d).imag:+.12g} i GeV^-1")


if __name__ == "__main__":
    re_, im_ = (float(sys.argv[2]), float(sys.argv[3])) if len(sys.argv) > 3 else (-0.05, 0.1)
    main(sys.argv[1], complex(re_, im_))
