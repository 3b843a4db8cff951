"""rlmeson: mesons in rainbow-ladder truncation from the gap and Bethe–Salpeter equations."""

# JAX is configured (float64, compilation cache) by ``rlmeson.numerics._jax``, which every module
# that computes imports; ``import rlmeson`` and reading a config do not import JAX.

__version__ = "0.1.0"


def open_propagator(path):
    """A dressed quark from a file written by ``rlmeson export`` (netCDF-4 or HDF5):
    A, B, σ_V, σ_S, M at real p² and at complex p² inside the exported region."""
    from .io.readers import open_propagator as _open

    return _open(path)


def open_amplitude(path):
    """A normalised Bethe–Salpeter amplitude from a file written by ``rlmeson export``."""
    from .io.readers import open_amplitude as _open

    return _open(path)


def load_config(source, overrides=()):
    """A validated config from a TOML file path or a dict of the same layout, with
    optional ``KEY=VALUE`` overrides (as ``--set`` on the command line)."""
    from .io import config

    if isinstance(source, dict):
        return config.from_dict(config.apply_overrides(source, overrides))
    return config.load(source, overrides)


def run(cfg, cache: bool = True, progress=None):
    """Solve every quark and meson of ``cfg`` (a config, path or dict); returns the
    pipeline's ``RunResult`` (``.summary()`` is what summary.json holds).  Results are
    read from and written to the cache unless ``cache`` is False."""
    from .workflows import pipeline

    if not hasattr(cfg, "hash"):
        cfg = load_config(cfg)
    kw = {} if progress is None else {"progress": progress}
    return pipeline.run(cfg, pipeline.store_of(cfg, cache), **kw)


def scan(cfg, workers: int | None = 1, dask: str | None = None, cache: bool = True, overrides=(),
         out=None, progress=None):
    """Run the ``[scan]`` axes of ``cfg`` (a path, a dict of the TOML layout, or a
    ``rlmeson.workflows.scans.Scan``); returns a ``ScanResult`` (``.dataset`` the xarray Dataset over
    the axes, ``.results`` every point with its status, ``.failed``).  ``workers``: 1 in
    this process, N worker processes, None one per core; ``dask``: a scheduler address or
    ``"local"``.  ``out``: also write scan.nc, scan.json and the figures there."""
    from .workflows.scans import scan as _scan

    return _scan(cfg, workers=workers, dask=dask, cache=cache, overrides=overrides, out=out, progress=progress)


def fit(cfg, overrides=(), cache: bool = True, out=None, progress=None):
    """Fit the ``[fit]`` parameters of ``cfg`` (a path, a dict of the TOML layout, or a
    ``FitSpec``) to its targets by least squares with exact derivatives; returns a
    ``FitResult`` (``.parameters``, ``.achieved``, ``.converged``, ``.history``,
    ``.covariance()``, ``.config`` the fitted config, ``.to_json()`` what fit.json holds).
    ``out``: also write fit.json, fitted.toml, report.txt and fit.png there."""
    from .workflows.fit import fit as _fit

    return _fit(cfg, overrides=overrides, cache=cache, out=out, progress=progress)


def open_run(path):
    """A run directory written by ``rlmeson run``: ``.summary``, ``.quarks``, ``.mesons``,
    ``.config``, ``.propagator(flavour)``, ``.amplitude(meson)``."""
    from .io.readers import open_run as _open

    return _open(path)
