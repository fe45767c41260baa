"""deepwell: weigh the dark mass at a galaxy's centre from the orbits of its stars.

The library's face; each folder below has its own (see DEVELOPERS.md)::

    obs = read_observations("scenarios/rich")
    result = fit_joint(obs, load_settings("fit.toml"))      # or Settings()
    write_report(result, "report", analyse(result))
"""

from .core import DeepwellError, InputError, OutputError, SettingsError, __version__
from .fit import FitResult, fit_joint, sample_posterior
from .report import save_report, write_report
from .results import Analyses, analyse, load_fit
from .tables import Settings, load_settings, read_observations

__all__ = ["read_observations", "load_settings", "Settings", "fit_joint", "FitResult",
           "sample_posterior", "analyse", "Analyses", "load_fit", "write_report", "save_report",
           "DeepwellError", "InputError", "OutputError", "SettingsError", "__version__"]
