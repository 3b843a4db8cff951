"""Outputs for people and for other codes.

* ``results.h5``: plain HDF5 (datasets + attributes, readable with h5py alone):
  ``/quarks/<flavour>/{q2, A, B, M, Z}`` and ``/mesons/<name>/{q2, z, amplitude_re,
  amplitude_im, moments_re, moments_im, curve_mass, curve_eigenvalue}`` (+ ``EFGH_re/_im``
  for pseudoscalars); each group's attributes hold its summary as JSON text.
* xarray datasets (``propagator_dataset``, ``amplitude_dataset``) written as netCDF
  (classic format, so any netCDF reader can open them; complex numbers as _re/_im).
* ``propagator_<flavour>.csv``: p², A, B, M, Z.

Amplitudes are stored in the run's decay-constant convention, labelled in the attributes.
Covariant order and definitions: ``channels`` (``basis_labels``); moments are the
Chebyshev-U moments F_m(q) with F(q, z) = Σ_m F_m(q) U_m(z), z = q̂·P̂.
"""

from __future__ import annotations

import io
import json

import numpy as np

from . import channels, observables
from . import quadrature as qd
from .store import atomic_path, atomic_write_text


def propagator_dataset(q):
    import xarray as xr

    s = q.solution
    ds = xr.Dataset(
        {"A": ("p2", s.A), "B": ("p2", s.B), "M": ("p2", s.M), "Z": ("p2", s.Z)},
        coords={"p2": ("p2", s.q2, {"units": "GeV^2"})},
        attrs={"description": "dressed quark propagator S(p) = 1/(i gamma.p A + B), Euclidean p^2",
               "B_units": "GeV", "M_units": "GeV", "Z2": s.z2, "Zm": s.zm,
               "current_mass_gev": s.mass_gev, "renormalisation_point_gev": s.zeta_gev,
               "regularisation": s.kernel.label, "flavour": q.flavour, "config_key": q.key},
    )
    return ds


def moments(amp: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Chebyshev-U moments over the z axis (axis 1) of node values."""
    n = len(z)
    _, w = qd.chebyshev_u_nodes(n)
    u = qd.chebyshev_u(n - 1, z)  # (k, m)
    return (2.0 / np.pi) * np.einsum("k,km,ikq->imq", w, u, amp)


def amplitude_dataset(m):
    import xarray as xr

    core = m.core
    amp = core.normalised.amplitude * m.factor
    mom = moments(amp, core.z)
    labels = list(channels.get(m.channel).basis_labels)
    ds = xr.Dataset(
        {"amplitude_re": (("covariant", "z", "q2"), amp.real),
         "amplitude_im": (("covariant", "z", "q2"), amp.imag),
         "moments_re": (("covariant", "m", "q2"), mom.real),
         "moments_im": (("covariant", "m", "q2"), mom.imag)},
        coords={"covariant": ("covariant", np.arange(len(labels))), "z": ("z", core.z),
                "m": ("m", np.arange(len(core.z))), "q2": ("q2", core.q2, {"units": "GeV^2"})},
        attrs={"meson": m.name, "channel": m.channel, "mass_gev": core.mass_gev,
               "covariants": json.dumps(labels),
               "convention": observables.CONVENTION_LABELS[m.convention],
               "frame": "rest frame, P = (0,0,0,iM), q^ = (0,0,sqrt(1-z^2),z), eta = 1/2",
               "normalisation": "Nakanishi (canonical agreement %.2e)" % core.normalised.normalisation_agreement},
    )
    return ds


def write_netcdf(ds, path) -> None:
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="scipy", format="NETCDF3_64BIT")


def write_propagator_csv(q, path) -> None:
    s = q.solution
    buf = io.StringIO()
    buf.write(f"# dressed quark propagator, flavour {q.flavour}, {s.kernel.label}\n")
    buf.write("p2_gev2,A,B_gev,M_gev,Z\n")
    for row in zip(s.q2, s.A, s.B, s.M, s.Z):
        buf.write(",".join(f"{v:.16e}" for v in row) + "\n")
    atomic_write_text(path, buf.getvalue())


def write_results_h5(run, path) -> None:
    import h5py

    summ = run.summary()
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as h:
            h.attrs["summary"] = json.dumps(summ, default=str)
            h.attrs["config"] = json.dumps(run.config.to_dict(), default=str)
            for name, q in run.quarks.items():
                g = h.create_group(f"quarks/{name}")
                s = q.solution
                for key, val in (("q2", s.q2), ("A", s.A), ("B", s.B), ("M", s.M), ("Z", s.Z)):
                    g.create_dataset(key, data=val)
                g.attrs["summary"] = json.dumps(q.summary(), default=str)
            for m, ms in zip(run.mesons, summ["mesons"]):
                g = h.create_group(f"mesons/{m.name}")
                core = m.core
                amp = core.normalised.amplitude * m.factor
                mom = moments(amp, core.z)
                g.create_dataset("q2", data=core.q2)
                g.create_dataset("z", data=core.z)
                g.create_dataset("amplitude_re", data=amp.real)
                g.create_dataset("amplitude_im", data=amp.imag)
                g.create_dataset("moments_re", data=mom.real)
                g.create_dataset("moments_im", data=mom.imag)
                cm, cl = core.curve.sorted()
                g.create_dataset("curve_mass", data=cm)
                g.create_dataset("curve_eigenvalue", data=cl)
                if m.channel == "pseudoscalar" and core.mass_gev > 0:
                    efgh = pseudoscalar_efgh(m)
                    g.create_dataset("EFGH_re", data=efgh.real)
                    g.create_dataset("EFGH_im", data=efgh.imag)
                    g.attrs["EFGH"] = ("Gamma = gamma5 [i E + gamma.P F + gamma.q (q.P) G + sigma_mn q_m P_n H], "
                                       "P = (0,0,0,iM); same convention as the amplitude")
                g.attrs["covariants"] = json.dumps(list(channels.get(m.channel).basis_labels))
                g.attrs["summary"] = json.dumps(ms, default=str)


def pseudoscalar_efgh(m) -> np.ndarray:
    """E, F, G, H on the grid for a pseudoscalar result (run convention)."""
    from types import SimpleNamespace

    core = m.core
    view = SimpleNamespace(z=core.z, q2=core.q2, channel=channels.get("pseudoscalar"))
    return observables.pseudoscalar_standard_basis(view, core.normalised.amplitude * m.factor, core.mass_gev)
