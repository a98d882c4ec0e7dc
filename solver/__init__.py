"""bandwright's planning library: spectrum, link physics and the carrier packer.

Pure computation: no web, no database.  The public names are listed in ``__all__``; the service
imports only these.  The physics floor (spectra, amplifiers, MODCODs, link budgets) lives in
:mod:`solver.physics` and depends on nothing in the solver but :mod:`solver.model`.
"""

from solver.equipment import DEFAULT_SET, carrier_emission_key, modcod_table
from solver.evaluate import CarrierEvaluation, LeakageAtGap, evaluate_carrier
from solver.explain import LimitedBy, Shortfall, explain_shortfalls
from solver.model import (
    Amplifier,
    AmplifierModel,
    Block,
    Carrier,
    CarrierConfig,
    Coding,
    CurrentSetting,
    Demand,
    EquipmentProfile,
    Exclusion,
    HandComparison,
    ModcodRow,
    Modulation,
    Objective,
    Plan,
    PlanSummary,
    Problem,
    ProblemError,
    ProgressEvent,
    SolveCancelledError,
    SolveStats,
    SolveStatus,
    Transmitter,
    Unserved,
    UnservedReason,
    Window,
    format_code_rate,
    parse_code_rate,
)
from solver.physics.bounds import capacity_bound, shannon_nyquist_bound
from solver.physics.emission import EmissionKey, SpectrumProfile, get_profile
from solver.physics.modcod import ModcodEntry, catalogue
from solver.physics.modcodsets import MODCOD_SET_NAMES
from solver.planner import solve
from solver.rules import hand_comparison, rule_of_thumb_plan
from solver.spectrum_figures import SpectrumGain, SpectrumValue
from solver.summary import CAUTIONS, SettingChange, setting_change, setting_of
from solver.validation import validate_problem
from solver.verify import LEAKAGE_TOLERANCE_DB, Verification, Violation, verify_plan
from solver.worksize import ConfigurationBound, configuration_bound

__all__ = [
    "CAUTIONS",
    "DEFAULT_SET",
    "LEAKAGE_TOLERANCE_DB",
    "MODCOD_SET_NAMES",
    "Amplifier",
    "AmplifierModel",
    "Block",
    "Carrier",
    "CarrierConfig",
    "CarrierEvaluation",
    "Coding",
    "ConfigurationBound",
    "CurrentSetting",
    "Demand",
    "EmissionKey",
    "EquipmentProfile",
    "Exclusion",
    "HandComparison",
    "LeakageAtGap",
    "LimitedBy",
    "ModcodEntry",
    "ModcodRow",
    "Modulation",
    "Objective",
    "Plan",
    "PlanSummary",
    "Problem",
    "ProblemError",
    "ProgressEvent",
    "SettingChange",
    "Shortfall",
    "SolveCancelledError",
    "SolveStats",
    "SolveStatus",
    "SpectrumGain",
    "SpectrumProfile",
    "SpectrumValue",
    "Transmitter",
    "Unserved",
    "UnservedReason",
    "Verification",
    "Violation",
    "Window",
    "capacity_bound",
    "carrier_emission_key",
    "catalogue",
    "configuration_bound",
    "evaluate_carrier",
    "explain_shortfalls",
    "format_code_rate",
    "get_profile",
    "hand_comparison",
    "modcod_table",
    "parse_code_rate",
    "rule_of_thumb_plan",
    "setting_change",
    "setting_of",
    "shannon_nyquist_bound",
    "solve",
    "validate_problem",
    "verify_plan",
]
