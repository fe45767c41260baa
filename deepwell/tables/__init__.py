"""What the user hands in: observation tables, settings files, external constraints.

Everything is validated and converted to internal units here; a bad value
stops with one line naming the file, line and column.
"""

from .constraints import ExternalConstraints, read_external_constraints
from .datasets import DatasetConfig, datasets_from_args, parse_datasets
from .effects import Effects, effects_from_args, parse_effects
from .observations import DataWarning, Observations, read_observations
from .settings import Settings, SharedSetting, StarSetting, load_settings, parse_settings
from .size import check_memory, input_size

__all__ = ["Observations", "DataWarning", "read_observations", "Settings", "SharedSetting",
           "StarSetting", "load_settings", "parse_settings", "Effects", "parse_effects",
           "effects_from_args", "DatasetConfig", "parse_datasets", "datasets_from_args",
           "ExternalConstraints", "read_external_constraints", "check_memory", "input_size"]
