"""Files for other codes: the dressed quark (real axis, the complex region, the rational
approximant and its poles) and the normalised Bethe–Salpeter amplitudes, as xarray
Datasets written as netCDF-4 (HDF5 underneath, through h5netcdf on h5py), as plain
HDF5 (h5py alone; the same variable names at the root, the same attributes) or, for the
real axis of the propagator only, as CSV.

Every variable carries ``units`` and ``long_name`` (CF style); complex values are
stored as ``<name>_re`` / ``<name>_im`` pairs so that C and Fortran readers need no
complex type; the global attributes say what produced the file (config hash, package
version, resolved inputs) and in which conventions.  The schema is in the README
("Files for other codes"); ``readers`` opens them again.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np

from .. import __version__
from ..model import channels
from ..meson import observables
from .export import moments
from .store import atomic_path, atomic_write_text

FORMATS = ("netcdf", "hdf5", "csv")
SUFFIX = {"netcdf": ".nc", "hdf5": ".h5", "csv": ".csv"}
SCHEMA = "rlmeson-exchange-1"

PROPAGATOR_CONVENTIONS = (
    "Euclidean metric; S(p) = 1/(i gamma.p A(p^2) + B(p^2)) = -i gamma.p sigma_V(p^2) + sigma_S(p^2), "
    "sigma_V = A/(p^2 A^2 + B^2), sigma_S = B/(p^2 A^2 + B^2); M = B/A, Z = 1/A; p^2 > 0 spacelike; "
    "Landau gauge; renormalised A(zeta^2) = 1, B(zeta^2) = m(zeta); units GeV")
RATIONAL_FORM = ("r(s) = sum_j w_j f_j/(s - s_j) / sum_j w_j/(s - s_j) with support points s_j "
                 "(aaa_<f>_support), values f_j (aaa_<f>_values) and weights w_j (aaa_<f>_weights); "
                 "r(s_j) = f_j")


def _complex(name: str, dims, value, units: str, long_name: str) -> dict:
    value = np.asarray(value)
    return {f"{name}_re": (dims, np.real(value), {"units": units, "long_name": f"real part of {long_name}"}),
            f"{name}_im": (dims, np.imag(value), {"units": units, "long_name": f"imaginary part of {long_name}"})}


def _json(obj) -> str:
    return json.dumps(obj, sort_keys=True, default=str)


def provenance(cfg, producer: str) -> dict:
    """Global attributes every exchange file carries."""
    return {"Conventions": "CF-1.10", "schema": SCHEMA, "package": "rlmeson",
            "package_version": __version__, "created_by": f"rlmeson {__version__} ({producer})",
            "config_name": cfg.name, "config_hash": cfg.hash(), "config": _json(cfg.to_dict())}


# ----------------------------------------------------------------------------------------
# The propagator

def propagator_dataset(cfg, quark, plane=None):
    """Real axis of ``quark`` (a ``pipeline.QuarkResult``) and, with a
    ``quarkplane.QuarkPlane``, its complex region, approximants and singularities."""
    import xarray as xr

    from ..workflows.pipeline import kernel_of

    s = quark.solution
    kern = kernel_of(cfg)
    d = s.q2 * s.A**2 + s.B**2
    flag = np.zeros(s.q2.shape, np.int8) if kern.hard else (s.q2 > kern.regulator_gev2).astype(np.int8)
    data = {
        "A": ("p2", s.A, {"units": "1", "long_name": "vector dressing function A(p^2)"}),
        "B": ("p2", s.B, {"units": "GeV", "long_name": "scalar dressing function B(p^2)"}),
        "M": ("p2", s.M, {"units": "GeV", "long_name": "mass function M(p^2) = B/A"}),
        "Z": ("p2", s.Z, {"units": "1", "long_name": "wave-function renormalisation Z(p^2) = 1/A"}),
        "sigma_v": ("p2", s.A / d, {"units": "GeV-2", "long_name": "vector part sigma_V = A/(p^2 A^2 + B^2)"}),
        "sigma_s": ("p2", s.B / d, {"units": "GeV-1", "long_name": "scalar part sigma_S = B/(p^2 A^2 + B^2)"}),
        "above_regulator_scale": ("p2", flag, {
            "units": "1", "flag_values": np.array([0, 1], np.int8),
            "flag_meanings": "physical above_translation_invariant_regulator_scale",
            "long_name": "1 where p^2 exceeds Lambda_R^2: values there are artefacts of the regulator"}),
    }
    coords = {"p2": ("p2", s.q2, {"units": "GeV2", "long_name": "Euclidean momentum squared on the real axis "
                                  "(Gauss-Legendre nodes of panels in ln p^2)"})}
    attrs = provenance(cfg, "propagator export")
    attrs.update({
        "title": f"dressed quark propagator, flavour {quark.flavour}",
        "quantity": "quark_propagator", "flavour": quark.flavour, "conventions": PROPAGATOR_CONVENTIONS,
        "current_mass_gev": s.mass_gev, "renormalisation_point_gev": s.zeta_gev,
        "Z2": s.z2, "Zm": s.zm, "Z4": s.z4, "gap_residual": s.residual,
        "model": kern.model, "model_parameters": _json(dict(kern.params)),
        "regularisation": kern.regularisation, "regularisation_scale_gev2": kern.scale_gev2,
        "regularisation_description": kern.label, "kernel_carries_z2_squared": int(kern.z2_squared),
        "real_axis_ln_p2_panel_edges": np.asarray(s.radial.edges), "real_axis_panel_order": s.radial.order,
        "real_axis_interpolation": "Lagrange interpolation in ln p^2 on each panel through its Gauss-Legendre nodes",
        "quark_summary": _json(quark.summary()),
    })
    if plane is not None:
        data.update(_region_variables(plane, quark))
        attrs.update(_region_attributes(plane, quark))
        coords.update({
            "region_z": ("region_z", plane.samples.z, {"units": "1", "long_name": "cosine of the angle between "
                                                       "q and P at the region nodes (Chebyshev-U nodes)"}),
            "region_q2": ("region_q2", plane.samples.q2, {"units": "GeV2", "long_name": "q^2 of the region nodes "
                                                          "(Gauss-Legendre nodes of panels in ln q^2)"})})
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _confirmed(quark):
    """The quark stage's confirmed nearest singularity (None when unconfirmed)."""
    return complex(quark.singularity_gev2) if quark.confirmed and quark.singularity_gev2 is not None else None


def _region_variables(plane, quark) -> dict:
    smp = plane.samples
    dims = ("region_z", "region_q2")
    out = {}
    out.update(_complex("region_p2", dims, smp.x2, "GeV2", "the complex momentum squared p^2 = q^2 - eta^2 M^2 "
                        "+ 2 i eta M q z at the region nodes"))
    out.update(_complex("region_A", dims, smp.A, "1", "A at the region nodes (shifted continuation)"))
    out.update(_complex("region_B", dims, smp.B, "GeV", "B at the region nodes (shifted continuation)"))
    out["region_covariance_residual"] = (dims, smp.covariance_residual, {
        "units": "1", "long_name": "|A from the gamma.P part - A from the gamma.q_T part| / |A| (0 if exact)"})
    for f, r, units in (("A", plane.A, "1"), ("B", plane.B, "GeV")):
        dim = (f"aaa_{f}",)
        out.update(_complex(f"aaa_{f}_support", dim, r.support, "GeV2", f"support points s_j of the rational "
                            f"approximant of {f}"))
        out.update(_complex(f"aaa_{f}_values", dim, r.values, units, f"values f_j = {f}(s_j)"))
        out.update(_complex(f"aaa_{f}_weights", dim, r.weights, "1", "barycentric weights w_j"))
    poles = plane.A.poles()
    poles = poles[np.argsort(np.abs(poles))]
    out.update(_complex("aaa_poles", ("aaa_pole",), poles, "GeV2", "poles of the approximants of A and B (one "
                        "support set, so common to both; not singularities of S, which are zeros of p^2 A^2 + B^2)"))
    for f, r, units in (("A", plane.A, "GeV2"), ("B", plane.B, "GeV3")):
        out.update(_complex(f"aaa_{f}_residues", ("aaa_pole",), r.residues(poles), units,
                            f"residues of the approximant of {f} at its poles"))
    sings = list(plane.singularities)
    dim = ("singularity",)
    out.update(_complex("singularity_p2", dim, [x.s_gev2 for x in sings], "GeV2",
                        "zeros of p^2 A^2 + B^2 of the approximants in the upper half plane (each with its "
                        "complex conjugate), nearest first: extrapolations beyond the sampled region; only the "
                        "one flagged by singularity_confirmed was checked"))
    conf = _confirmed(quark)
    out["singularity_confirmed"] = (dim, np.array([int(conf is not None and abs(x.s_gev2 - conf) <= 1e-3 * abs(conf))
                                                   for x in sings], np.int8), {
        "units": "1", "flag_values": np.array([0, 1], np.int8), "flag_meanings": "unconfirmed confirmed",
        "long_name": "1 for the quark stage's nearest singularity, confirmed by a shifted solve just beyond the "
                     "M_max it allows (quark_summary: singularity_shifted_check)"})
    out.update(_complex("singularity_residue_sigma_s", dim,
                        [x.residue_sigma_s if x.residue_sigma_s is not None else np.nan for x in sings], "GeV",
                        "residue of sigma_S at the zero"))
    out["singularity_max_bound_state_mass"] = (dim, np.array([x.max_mass(smp.eta) for x in sings]), {
        "units": "GeV", "long_name": "largest bound-state mass whose parabola (momentum fraction eta) leaves "
                                     "the singularity outside: |Im sqrt(p^2)|/eta"})
    return out


def _region_attributes(plane, quark) -> dict:
    smp = plane.samples
    conf = _confirmed(quark)
    return {
        "region_continuation": "shifted (quark-routed): the gap equation solved at p = q + eta P with the gluon "
                               "momentum real; the analytic continuation of the real-axis solution",
        "region_eta": smp.eta, "region_mass_gev": smp.mass_gev, "region_apex_gev2": smp.apex_gev2,
        "region_shape": "interior of the parabola Re p^2 >= (Im p^2)^2/(4 eta^2 M^2) - eta^2 M^2, with "
                        "q^2 = Re p^2 + eta^2 M^2 between the first and last region_q2",
        "region_ln_q2_panel_edges": np.asarray(smp.radial.edges), "region_panel_order": smp.radial.order,
        "region_interpolation": "Chebyshev-U series in z through the region_z nodes, Lagrange in ln q^2 per panel",
        "region_shifted_residual": smp.residual,
        "approximant": "AAA rational approximation (Nakatsukasa, Sete & Trefethen 2018) in barycentric form",
        "approximant_form": RATIONAL_FORM,
        "approximant_window_gev2": plane.window_gev2,
        "approximant_domain": "complex p^2 inside the region with |p^2| <= approximant_window_gev2",
        "approximant_holdout_error": plane.holdout_error,
        "approximant_real_axis_error": plane.real_axis_error,
        "nearest_singularity_re_gev2": np.nan if conf is None else conf.real,
        "nearest_singularity_im_gev2": np.nan if conf is None else conf.imag,
        "nearest_singularity_status": quark.m_max_status(),
        "max_bound_state_mass_gev": np.nan if conf is None else float(quark.max_bound_state_mass_gev),
    }


# ----------------------------------------------------------------------------------------
# Amplitudes

def amplitude_dataset(cfg, meson, radial=None):
    """The normalised amplitude of ``meson`` (a ``pipeline.MesonResult``) in the run's
    decay-constant convention, on its (covariant, z, q²) nodes and as Chebyshev moments."""
    import xarray as xr

    core = meson.core
    amp = core.normalised.amplitude * meson.factor
    mom = moments(amp, core.z)
    ch = channels.get(meson.channel)
    labels = list(ch.basis_labels)
    summ = meson.summary()
    conv = observables.CONVENTION_LABELS[meson.convention]
    dims = ("covariant", "z", "q2")
    data = {}
    data.update(_complex("amplitude", dims, amp, "1", f"the normalised amplitude's coefficients of the covariants "
                         f"({conv})"))
    data.update(_complex("moments", ("covariant", "chebyshev", "q2"), mom, "1",
                         "Chebyshev-U moments F_m(q^2) of the coefficients, F(q^2, z) = sum_m F_m(q^2) U_m(z)"))
    data["covariant_label"] = ("covariant", np.array(labels, dtype=object), {"long_name": "covariant tau_i"})
    coords = {
        "covariant": ("covariant", np.arange(len(labels)), {"units": "1", "long_name": "index of the covariant"}),
        "z": ("z", core.z, {"units": "1", "long_name": "cosine of the angle between q and P (Chebyshev-U nodes)"}),
        "chebyshev": ("chebyshev", np.arange(len(core.z)), {"units": "1", "long_name": "order m of U_m(z)"}),
        "q2": ("q2", core.q2, {"units": "GeV2", "long_name": "relative momentum squared q^2"}),
    }
    attrs = provenance(cfg, "amplitude export")
    attrs.update({
        "title": f"normalised Bethe-Salpeter amplitude of {meson.name}",
        "quantity": "bethe_salpeter_amplitude", "meson": meson.name, "channel": meson.channel, "jpc": ch.jpc,
        "quarks": _json(list(meson.quarks)), "mass_gev": core.mass_gev,
        "decay_constant_gev": summ["decay_constant_gev"], "decay_constant_convention": conv,
        "eta": float(getattr(meson, "eta", 0.5)), "frame": "rest frame: P = (0, 0, 0, iM), q = |q| (0, 0, sqrt(1 - z^2), z); quark momentum "
                             "q + eta P, antiquark q - (1 - eta) P",
        "basis": "Gamma(q; P) = sum_i F_i(q^2, z) tau_i(q^, P^) with q_T = q^ - (q^.P^) P^ (not normalised); "
                 "covariant_label names tau_i",
        "normalisation": "Nakanishi (eigenvalue derivative); canonical agreement "
                         f"{core.normalised.normalisation_agreement:.2e}",
        "amplitude_convention": f"the amplitude carries the decay-constant convention ({conv})",
        "interpolation": "Chebyshev-U series in z (the moments), Lagrange in ln q^2 per panel",
        "meson_summary": _json(summ),
    })
    if radial is not None:
        attrs.update({"ln_q2_panel_edges": np.asarray(radial.edges), "panel_order": radial.order})
    return xr.Dataset(data, coords=coords, attrs=attrs)


# ----------------------------------------------------------------------------------------
# Writers

def _clean_attrs(attrs: dict) -> dict:
    out = {}
    for k, v in attrs.items():
        if isinstance(v, bool):
            v = int(v)
        elif v is None:
            v = "null"
        elif isinstance(v, (dict, list, tuple)):
            v = _json(v)
        out[k] = v
    return out


def _prepared(ds):
    ds = ds.copy()
    ds.attrs = _clean_attrs(ds.attrs)
    for v in ds.variables.values():
        v.attrs = _clean_attrs(v.attrs)
    return ds


def write_netcdf(ds, path) -> None:
    """netCDF-4 (HDF5) through h5netcdf; atomic."""
    ds = _prepared(ds)
    encoding = {name: {"compression": "gzip", "compression_opts": 4}
                for name, v in ds.variables.items() if v.dtype.kind == "f" and v.size > 64}
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf", encoding=encoding)


def write_hdf5(ds, path) -> None:
    """Plain HDF5 with h5py: one dataset per variable and coordinate at the root, with
    ``units``, ``long_name`` and ``dimensions`` attributes; the global attributes as root
    attributes.  Same names as the netCDF file, so one reader serves both."""
    import h5py

    ds = _prepared(ds)
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as h:
            for k, v in ds.attrs.items():
                h.attrs[k] = v
            for name, var in ds.variables.items():
                arr = var.values
                if arr.dtype.kind in "OU":
                    arr = np.array([str(x) for x in arr.ravel()], dtype=h5py.string_dtype()).reshape(arr.shape)
                d = h.create_dataset(name, data=arr)
                for k, v in var.attrs.items():
                    d.attrs[k] = v
                d.attrs["dimensions"] = np.array(list(var.dims), dtype=h5py.string_dtype())


def write_propagator_csv(cfg, quark, path) -> None:
    """The real axis: p², A, B, M, Z, σ_V, σ_S and the regulator flag, with a commented
    header saying what produced it."""
    ds = propagator_dataset(cfg, quark)
    buf = io.StringIO()
    buf.write(f"# dressed quark propagator, flavour {quark.flavour}; rlmeson {__version__}; "
              f"config {cfg.name} (hash {cfg.hash()})\n")
    buf.write(f"# {PROPAGATOR_CONVENTIONS}\n")
    buf.write(f"# {ds.attrs['regularisation_description']}; m(zeta = {ds.attrs['renormalisation_point_gev']:g} GeV)"
              f" = {ds.attrs['current_mass_gev']:.10g} GeV\n")
    cols = ("p2", "A", "B", "M", "Z", "sigma_v", "sigma_s", "above_regulator_scale")
    units = {c: (ds[c].attrs.get("units", "1")) for c in cols}
    buf.write(",".join(f"{c}[{units[c]}]" for c in cols) + "\n")
    arrs = [ds[c].values for c in cols]
    for row in zip(*arrs):
        buf.write(",".join(f"{v:.16e}" if isinstance(v, float) or np.issubdtype(type(v), np.floating)
                           else str(int(v)) for v in row) + "\n")
    atomic_write_text(path, buf.getvalue())


def write(ds, path, fmt: str) -> None:
    if fmt == "netcdf":
        write_netcdf(ds, path)
    elif fmt == "hdf5":
        write_hdf5(ds, path)
    else:
        raise ValueError(f"format {fmt!r}: allowed netcdf, hdf5 (csv only for the propagator's real axis)")


def target(out: Path, kind: str, name: str, fmt: str) -> Path:
    return Path(out) / f"{kind}_{name}{SUFFIX[fmt]}"
