"""Outputs for people and for other codes.

* ``results.h5``: plain HDF5 (datasets + attributes, readable with h5py alone):
  ``/quarks/<flavour>/{q2, A, B, M, Z, above_regulator_scale}`` and ``/mesons/<name>/{q2,
  z, amplitude_re, amplitude_im, moments_re, moments_im, curve_mass, curve_eigenvalue,
  spectrum_mass, spectrum_p2, spectrum_re, spectrum_im, spacelike_p2, spacelike_re/_im,
  above_regulator_scale}`` (+
  ``EFGH_re/_im`` for pseudoscalars); every dataset has ``units``, ``long_name`` and
  ``dimensions`` attributes; the file and each group carry ``config_hash`` and
  ``package_version``; each group's ``summary`` attribute holds its summary as JSON text.
* the files for other codes (netCDF-4, plain HDF5, CSV) are written by ``exchange``.

Amplitudes are stored in the run's decay-constant convention, labelled in the attributes.
Covariant order and definitions: ``channels`` (``basis_labels``); moments are the
Chebyshev-U moments F_m(q) with F(q, z) = Σ_m F_m(q) U_m(z), z = q̂·P̂.
"""

from __future__ import annotations

import json

import numpy as np

from ..model import channels
from ..meson import observables
from ..numerics import quadrature as qd
from .store import atomic_path


def moments(amp: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Chebyshev-U moments over the z axis (axis 1) of node values."""
    n = len(z)
    _, w = qd.chebyshev_u_nodes(n)
    u = qd.chebyshev_u(n - 1, z)  # (k, m)
    return (2.0 / np.pi) * np.einsum("k,km,ikq->imq", w, u, amp)


#: Units of E, F, G, H (the normalised Γ is dimensionless).
EFGH_UNITS = ("1", "GeV^-1", "GeV^-3", "GeV^-2")


def above_regulator_scale(kernel, q2) -> np.ndarray:
    """True where q² exceeds the regulator scale Λ_R² of a translation-invariant
    regularisation (there the dressing functions flatten: an artefact of the regulator,
    not physics).  All False with a hard cutoff (the grid ends at Λ²)."""
    q2 = np.asarray(q2, dtype=float)
    if kernel.hard:
        return np.zeros(q2.shape, dtype=bool)
    return q2 > kernel.regulator_gev2


def _dataset(g, name, data, units, dims, long_name):
    import h5py

    d = g.create_dataset(name, data=data)
    d.attrs["units"] = units
    d.attrs["long_name"] = long_name
    d.attrs["dimensions"] = np.array(list(dims), dtype=h5py.string_dtype())
    return d


def _attach(d, *scales):
    for axis, sc in enumerate(scales):
        if sc is not None:
            d.dims[axis].attach_scale(sc)


def write_results_h5(run, path) -> None:
    """``results.h5`` (see the module doc).  Every dataset has ``units``, ``long_name``
    and ``dimensions`` attributes (coordinates are also HDF5 dimension scales); the file
    carries the run's ``config_hash``, the package version, the resolved inputs and the
    summary, so another code can read it with h5py alone."""
    import h5py

    from .. import __version__
    from ..workflows.pipeline import kernel_of

    summ = run.summary()
    kern = kernel_of(run.config)
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as h:
            h.attrs["created_by"] = f"rlmeson {__version__} (rlmeson run)"
            h.attrs["package"] = "rlmeson"
            h.attrs["package_version"] = __version__
            h.attrs["config_hash"] = summ["config_hash"]
            h.attrs["config_name"] = run.config.name
            h.attrs["decay_constant_convention"] = observables.CONVENTION_LABELS[
                run.config.output.decay_constant_convention]
            h.attrs["regularisation"] = kern.label
            h.attrs["regularisation_scale_gev2"] = kern.scale_gev2
            h.attrs["summary"] = json.dumps(summ, default=str)
            h.attrs["config"] = json.dumps(run.config.to_dict(), default=str)
            h.attrs["inputs"] = json.dumps(summ["inputs"], default=str)
            for name, q in run.quarks.items():
                g = h.create_group(f"quarks/{name}")
                s = q.solution
                p2 = _dataset(g, "q2", s.q2, "GeV^2", ("p2",), "Euclidean momentum squared p^2 (real axis)")
                p2.make_scale("p2")
                for key, val, units, long in (
                        ("A", s.A, "1", "vector dressing A(p^2)"),
                        ("B", s.B, "GeV", "scalar dressing B(p^2)"),
                        ("M", s.M, "GeV", "mass function M = B/A"),
                        ("Z", s.Z, "1", "wave-function renormalisation Z = 1/A")):
                    _attach(_dataset(g, key, val, units, ("p2",), long), p2)
                flag = _dataset(g, "above_regulator_scale", above_regulator_scale(kern, s.q2), "1", ("p2",),
                                "True above the regulator scale Lambda_R^2 (values there are regulator "
                                "artefacts; figures leave them out)")
                _attach(flag, p2)
                g.attrs.update({"flavour": name, "current_mass_gev": s.mass_gev,
                                "renormalisation_point_gev": s.zeta_gev, "regularisation_scale_gev2": kern.scale_gev2,
                                "config_hash": summ["config_hash"], "package_version": __version__,
                                "summary": json.dumps(q.summary(), default=str)})
            for m, ms in zip(run.mesons, summ["mesons"]):
                _write_meson(h.create_group(f"mesons/{m.name}"), m, ms, kern, summ["config_hash"], __version__)


def _write_meson(g, m, ms, kern, config_hash, version) -> None:
    import h5py

    core = m.core
    conv = observables.CONVENTION_LABELS[m.convention]
    amp = core.normalised.amplitude * m.factor
    mom = moments(amp, core.z)
    labels = list(channels.get(m.channel).basis_labels)
    q2 = _dataset(g, "q2", core.q2, "GeV^2", ("q2",),
                  f"relative momentum squared q^2 (quarks at q + eta P and q - (1 - eta) P, eta = {m.eta:.6g})")
    q2.make_scale("q2")
    z = _dataset(g, "z", core.z, "1", ("z",), "cosine of the angle between q and P")
    z.make_scale("z")
    for part in ("re", "im"):
        val = amp.real if part == "re" else amp.imag
        _attach(_dataset(g, f"amplitude_{part}", val, "1", ("covariant", "z", "q2"),
                         f"{'real' if part == 're' else 'imaginary'} part of the normalised amplitude's "
                         f"coefficients of the covariants ({conv})"), None, z, q2)
        val = mom.real if part == "re" else mom.imag
        _attach(_dataset(g, f"moments_{part}", val, "1", ("covariant", "chebyshev_u_order", "q2"),
                         f"Chebyshev-U moments F_m(q^2), F(q^2, z) = sum_m F_m U_m(z) ({part})"), None, None, q2)
    _dataset(g, "above_regulator_scale", above_regulator_scale(kern, core.q2), "1", ("q2",),
             "True above the regulator scale Lambda_R^2")
    cm, cl = core.curve.sorted()
    _dataset(g, "curve_mass", cm, "GeV", ("evaluation",), "masses M where the leading eigenvalue was evaluated")
    _dataset(g, "curve_eigenvalue", cl, "1", ("evaluation",), "leading eigenvalue lambda(P^2 = -M^2)")
    if core.spectrum is not None:
        sm, sl = core.spectrum
        _dataset(g, "spectrum_mass", sm, "GeV", ("point",), "masses M of the spectrum points")
        _dataset(g, "spectrum_p2", -sm**2, "GeV^2", ("point",), "P^2 = -M^2 of the spectrum points")
        _dataset(g, "spectrum_re", sl.real, "1", ("point", "eigenvalue"),
                 "real part of the leading eigenvalues lambda_1 >= lambda_2 >= lambda_3 at P^2")
        _dataset(g, "spectrum_im", sl.imag, "1", ("point", "eigenvalue"), "imaginary part of the same")
        if core.spectrum_c is not None:
            _dataset(g, "spectrum_c", np.asarray(core.spectrum_c, dtype=np.int8), "1", ("point", "eigenvalue"),
                     "charge parity C = +1/-1 of each of these eigenvalues (0: C is no symmetry, as for "
                     "unequal flavours or eta != 1/2)")
    if core.spacelike is not None:
        sp, sv = core.spacelike
        _dataset(g, "spacelike_p2", sp, "GeV^2", ("spacelike_point",), "spacelike P^2 > 0 of the spectrum points")
        _dataset(g, "spacelike_re", sv.real, "1", ("spacelike_point", "eigenvalue"),
                 "real part of the leading eigenvalues at spacelike P^2 (direct continuation: exact there)")
        _dataset(g, "spacelike_im", sv.imag, "1", ("spacelike_point", "eigenvalue"), "imaginary part of the same")
    if m.channel == "pseudoscalar":
        em = core.mass_gev if core.mass_gev > 0 else observables.CHIRAL_PROBES_GEV[0]
        efgh = pseudoscalar_efgh(m, em)
        for part in ("re", "im"):
            d = _dataset(g, f"EFGH_{part}", efgh.real if part == "re" else efgh.imag,
                         ", ".join(f"{c}: {u}" for c, u in zip("EFGH", EFGH_UNITS)), ("component", "z", "q2"),
                         f"E, F, G, H ({part}; {conv})")
            d.attrs["component_units"] = np.array(EFGH_UNITS, dtype=h5py.string_dtype())
            _attach(d, None, z, q2)
        g.attrs["EFGH"] = ("Gamma = gamma5 [i E + gamma.P F + gamma.q (q.P) G + sigma_mn q_m P_n H], "
                           "P = (0,0,0,iM); same convention as the amplitude")
        g.attrs["EFGH_mass_gev"] = em
        if core.mass_gev == 0:
            g.attrs["EFGH_note"] = (f"chiral limit: evaluated from the off-shell solution at M = {em:g} GeV "
                                    "(F, G, H multiply gamma.P)")
    g.attrs["covariants"] = json.dumps(labels)
    g.attrs["convention"] = conv
    g.attrs["config_hash"] = config_hash
    g.attrs["package_version"] = version
    g.attrs["summary"] = json.dumps(ms, default=str)


def pseudoscalar_efgh(m, mass_gev: float | None = None) -> np.ndarray:
    """E, F, G, H on the grid for a pseudoscalar result (run convention), at the bound
    state's mass (or ``mass_gev``: the off-shell probe mass of a chiral-limit result)."""
    from types import SimpleNamespace

    core = m.core
    view = SimpleNamespace(z=core.z, q2=core.q2, channel=channels.get("pseudoscalar"))
    return observables.pseudoscalar_standard_basis(view, core.normalised.amplitude * m.factor,
                                                   core.mass_gev if mass_gev is None else mass_gev)
