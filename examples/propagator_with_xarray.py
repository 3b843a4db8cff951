"""Read a propagator file written by `rlmeson export` with plain xarray (no rlmeson):
the real axis as a labelled Dataset, the complex region's nodes, and S at a complex p^2
from the stored rational approximant.

    python3 examples/propagator_with_xarray.py propagator_l.nc [RE IM]
"""

import sys

import numpy as np
import xarray as xr


def main(path, p2):
    ds = xr.open_dataset(path, engine="h5netcdf")
    print(ds.attrs["title"], "|", ds.attrs["conventions"][:60], "...")
    m = ds["M"]
    print(f"M(p^2 = {float(ds.p2[0]):.3g} GeV^2) = {float(m[0]):.6f} {m.attrs['units']}")
    print(f"region: apex {ds.attrs['region_apex_gev2']:.4g} GeV^2 (M = {ds.attrs['region_mass_gev']:g} GeV, "
          f"eta = {ds.attrs['region_eta']:g}), {ds.sizes['region_z']} x {ds.sizes['region_q2']} nodes")

    def rational(f):
        c = lambda n: ds[f"aaa_{f}_{n}_re"].values + 1j * ds[f"aaa_{f}_{n}_im"].values  # noqa: E731
        s_j, f_j, w_j = c("support"), c("values"), c("weights")
        return np.sum(w_j * f_j / (p2 - s_j)) / np.sum(w_j / (p2 - s_j))

    a, b = rational("A"), rational("B")
    print(f"A({p2}) = {a:.12g}")
    print(f"B({p2}) = {b:.12g} GeV")


if __name__ == "__main__":
    re_, im_ = (float(sys.argv[2]), float(sys.argv[3])) if len(sys.argv) > 3 else (-0.05, 0.1)
    main(sys.argv[1], complex(re_, im_))
