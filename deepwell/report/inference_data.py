"""The posterior sample as an arviz InferenceData file (netCDF), the format Bayesian tools read.

Groups written to ``posterior.nc``:

* ``posterior``: ``value`` (chain, draw, quantity) holds the reported
  quantities (mass in solMass, distance in pc, angles in deg, ...; one
  ``unit`` per quantity as a coordinate), ``internal`` (chain, draw,
  parameter) the internal vectors the model is evaluated at;
* ``sample_stats``: ``lp``, the log-posterior of every draw (up to a constant).

The attributes carry the convergence statement, the sampler and deepwell's
version.  Walkers of one ensemble (``--sampler ensemble``) are pooled into its
chain, draw by draw.  Quantity and parameter names are coordinates, not
variable names, so any star name is safe.
"""

import numpy as np

from deepwell.core.version import __version__
from deepwell.fit.sampling.convergence import import_arviz

__all__ = ["INFERENCE_FILE", "write_inference_data"]

INFERENCE_FILE = "posterior.nc"


def _chains(x):
    """(chain, draw, walker, ...) -> (chain, draw * walker, ...)."""
    x = np.asarray(x)
    return x.reshape((x.shape[0], x.shape[1] * x.shape[2]) + x.shape[3:])


def write_inference_data(posterior, path):
    """Write ``posterior`` (a PosteriorResult) to ``path`` as netCDF; return the path."""
    az = import_arviz()
    data = az.from_dict(
        posterior={"value": _chains(posterior.samples),
                   "internal": _chains(posterior.internal_samples)},
        sample_stats={"lp": _chains(posterior.log_prob)},
        coords={"quantity": list(posterior.labels), "parameter": list(posterior.internal_names)},
        dims={"value": ["quantity"], "internal": ["parameter"]},
    )
    data.posterior = data.posterior.assign_coords(unit=("quantity", list(posterior.units)))
    data.posterior.attrs.update({
        "software": f"deepwell {__version__}", "sampler": posterior.sampler,
        "converged": int(bool(posterior.converged)), "statement": posterior.statement,
        "seed": int(posterior.seed)})
    data.to_netcdf(str(path), engine="h5netcdf")
    return path
