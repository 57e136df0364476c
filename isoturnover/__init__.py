"""isoturnover: turnover rates, half-lives and pool fractions from diet-switch experiments.

The public API is flat: ``import isoturnover as iso`` and use ``iso.TurnoverModel``,
``iso.read_samples``, ``iso.DietHistory`` and the others listed in ``__all__``.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError
from importlib.metadata import version as _version

from . import isotopes, plotting, uncertainty
from .allometry import AllometryFit, fit_allometry
from .analysis import analyse, load_fits, run_demo
from .clocks import ClockResult, plot_clock, time_since_switch, time_since_switch_table
from .data import average_replicates, read_diets, read_masses, read_samples, series
from .demo import demo_path, load_demo
from .design import Design, design_schedule, evaluate_design
from .diet import DietHistory
from .equilibration import TissueTime, equilibration_time, integration_window, window_weight
from .errors import (
    BoundWarning,
    ConvergenceWarning,
    DataError,
    DataWarning,
    DesignWarning,
    FitError,
    GoodnessOfFitWarning,
    IdentifiabilityWarning,
    IsoturnoverError,
    IsoturnoverWarning,
    ScaleError,
    UnknownIsotopeError,
)
from .groups import FitSet, fit_each
from .growth import GrowthCurve
from .growthfit import GrowthFit, fit_growth, fit_growth_each, load_growth
from .growthrate import GrowthRateFit, fit_growth_rate
from .inverse import DietReconstruction, reconstruct_diet
from .model import TurnoverModel, fit_power_dilution
from .plotinverse import plot_reconstruction
from .plotplan import plot_design
from .plotpop import plot_population
from .population import population_estimate, random_effects
from .progress import reaction_progress
from .report import write_report
from .results import TurnoverFit
from .segmentplan import SegmentPlan, SegmentProfile, plan_segments
from .segments import formation_intervals
from .selection import compare, lr_test
from .serialization import load_fit
from .sharedfit import SharedFit, compare_groups, fit_shared
from .simulate import SampleSize, SimulationResult, sample_size, simulate_design

try:
    __version__ = _version("isoturnover")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0+unknown"

__all__ = [
    "__version__",
    "isotopes",
    "plotting",
    "uncertainty",
    "write_report",
    "DietHistory",
    "TurnoverModel",
    "fit_power_dilution",
    "compare",
    "lr_test",
    "fit_each",
    "FitSet",
    "fit_shared",
    "SharedFit",
    "compare_groups",
    "random_effects",
    "population_estimate",
    "equilibration_time",
    "integration_window",
    "window_weight",
    "TissueTime",
    "fit_allometry",
    "AllometryFit",
    "design_schedule",
    "evaluate_design",
    "Design",
    "simulate_design",
    "SimulationResult",
    "sample_size",
    "SampleSize",
    "plot_design",
    "plot_population",
    "time_since_switch",
    "time_since_switch_table",
    "ClockResult",
    "plot_clock",
    "reconstruct_diet",
    "DietReconstruction",
    "plot_reconstruction",
    "formation_intervals",
    "fit_growth_rate",
    "GrowthRateFit",
    "plan_segments",
    "SegmentPlan",
    "SegmentProfile",
    "read_samples",
    "read_diets",
    "read_masses",
    "average_replicates",
    "series",
    "fit_growth",
    "fit_growth_each",
    "GrowthFit",
    "GrowthCurve",
    "load_growth",
    "load_demo",
    "demo_path",
    "analyse",
    "run_demo",
    "load_fits",
    "reaction_progress",
    "TurnoverFit",
    "load_fit",
    "IsoturnoverError",
    "DataError",
    "FitError",
    "UnknownIsotopeError",
    "ScaleError",
    "IsoturnoverWarning",
    "DataWarning",
    "ConvergenceWarning",
    "BoundWarning",
    "IdentifiabilityWarning",
    "DesignWarning",
    "GoodnessOfFitWarning",
]
