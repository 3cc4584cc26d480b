"""Format 1.0 of sigmagrid's netCDF files: one table per file of every variable, dimension and
global attribute, with units, meaning and formula.

These tables are the one home of the descriptions. The writers pass each Dataset through
:func:`finish`, which sets ``units``, ``long_name`` and the flag attributes from the table and
stamps the format version and the history; ``docs/file-format.md`` is generated from the same
tables (:func:`markdown`), and the tests check that a written file holds nothing the tables do
not describe (:func:`undescribed`).

Readers call :func:`check`: a file of another major format version, or one written before
format versions, is refused with the advice to recompute it, never read silently wrong.
"""

from __future__ import annotations

import datetime as _dt
import shlex
import sys
from dataclasses import dataclass

import numpy as np

from .errors import FormatError  # noqa: F401 - raised here, caught by the command line

#: Format of the files this version writes. A reader accepts the same major version.
FORMAT_VERSION = "1.0"
#: Global attribute that carries it.
VERSION_ATTRIBUTE = "sigmagrid_format"

FILES = ("case", "summary", "progress", "ranking", "reduction", "validation")


@dataclass(frozen=True)
class Var:
    """One variable: ``units`` (UDUNITS-2; None for text), ``long_name`` (written to the file),
    ``formula`` (docs only), ``flags`` (meanings of the integer codes 0, 1, ...), ``only`` (when
    the variable is present, if not always)."""

    dims: tuple[str, ...]
    units: str | None
    long_name: str
    formula: str = ""
    flags: tuple[str, ...] = ()
    only: str = ""


SEA_ONLY = "with sea.enabled"

# ------------------------------------------------------------------------------- shared parts

#: Per-case scalars of a case file, copied into the summary and cases.csv: name -> (units, long name).
SCALARS = {
    "balance_residual": ("1", "relative entropy balance residual |Delta Phi - sum_j I_j| / Delta Phi"),
    "ignition_delay": ("s", "ignition delay (time of largest dT/dt)"),
    "equilibrium_temperature": ("K", "temperature at equilibrium with the reactor's pair held fixed"),
    "equilibrium_pressure": ("Pa", "pressure at equilibrium with the reactor's pair held fixed"),
    "final_temperature": ("K", "temperature at the end of the integration"),
    "entropy_change": ("J K-1", "change of the reactor's potential Phi over the case (S, or S - H/T isothermal)"),
    "entropy_produced_total": ("J K-1", "sum over reactions of the entropy produced"),
    "energy_drift": ("1", "relative change of the held energy (U isolated, H constant-pressure)"),
    "negative_entropy_share": ("1", "share of the entropy production that is negative (irreversible reactions)"),
    "worst_reversible_ratio": ("1", "lowest sigma_j / peak sigma of any reversible, non-duplicate reaction"),
    "worst_duplicate_group_ratio": ("1", "lowest summed sigma / peak sigma of any reversible duplicate group"),
    "closed_vessel_pressure_ratio": ("1", "adiabatic closed-vessel pressure ratio P_eq / P_0 (isolated cases)"),
    "solver_steps": ("1", "number of solver steps"),
    "wall_time": ("s", "wall-clock time of the relaxation"),
}

_SCALAR_FORMULAS = {
    "balance_residual": "|(Phi_end - Phi_0) - sum_j I_j| / |Phi_end - Phi_0|",
    "entropy_change": "Phi_end - Phi_0",
    "entropy_produced_total": "sum_j I_j",
    "energy_drift": "(E_end - E_0) / |E_0|, E = U (isolated) or H (constant-pressure)",
    "negative_entropy_share": "sum_j max(-I_j, 0) / sum_j |I_j|",
    "worst_reversible_ratio": "min_j max_t sigma_j(t) / max_t sigma(t) over reversible non-duplicate j",
    "closed_vessel_pressure_ratio": "P_eq / P_0",
}

#: Progress levels of ``time_to_progress`` and of the summary's time_to_<level>pct variables.
PROGRESS_LEVELS = (0.5, 0.9, 0.99)

REACTION_COORDS = {
    "reaction": Var(("reaction",), "1", "reaction index in the source mechanism",
                    "position of the reaction in the mechanism file the grid was run on, from 0 (Cantera's "
                    "order); a cut mechanism keeps the full mechanism's indices"),
    "equation": Var(("reaction",), None, "reaction equation", "as Cantera writes it; duplicates share one"),
    "duplicate_group": Var(("reaction",), "1", "reaction index of the first member of the reaction's duplicate "
                           "group", "equals `reaction` for a reaction that is no declared duplicate"),
    "reversible": Var(("reaction",), "1", "reaction is reversible", flags=("irreversible", "reversible")),
}

CASE_STATUS = "relaxed, not-relaxed or failed"

CASE_COORDS = {
    "case": Var(("case",), None, "case id", "16 hex digits of sha256 over reactor, initial state, composition "
                "and mechanism"),
    "label": Var(("case",), None, "case label"),
    "reactor": Var(("case",), None, "reactor type", "isolated, constant-pressure or isothermal"),
    "composition_name": Var(("case",), None, "mixture name"),
    "equivalence_ratio": Var(("case",), "1", "equivalence ratio"),
    "initial_temperature": Var(("case",), "K", "initial temperature"),
    "initial_pressure": Var(("case",), "Pa", "initial pressure"),
    "status": Var(("case",), None, f"case status: {CASE_STATUS}"),
}

COMMON_ATTRS = {
    "Conventions": "CF conventions version the file follows (CF-1.10)",
    VERSION_ATTRIBUTE: "layout version of the file (this document); readers refuse another major version",
    "title": "what the file is",
    "source": "the program that wrote it",
    "history": "UTC time and command that wrote the file",
    "references": "published sources of the quantities",
    "comment": "how to read the values",
}

_GRID_ATTRS = {
    "mechanism": "file name of the mechanism",
    "mechanism_sha256": "sha256 of the mechanism file's bytes",
    "study": "the config's `study` text",
}

_PROVENANCE_ATTRS = {
    **_GRID_ATTRS,
    "config_sha256": "sha256 of the validated config",
    "sigmagrid_version": "version of sigmagrid",
    "cantera_version": "version of Cantera",
}

# --------------------------------------------------------------------------------- case file

_CASE_VARS = {
    "time": Var(("time",), "s", "time since the start of the relaxation",
                "elapsed seconds, no reference date (the documented CF exception, section 4.4)"),
    "species": Var(("species",), None, "species name"),
    **REACTION_COORDS,
    "progress_level": Var(("progress_level",), "1", "progress level", "0.5, 0.9, 0.99"),
    "temperature": Var(("time",), "K", "temperature of the reactor's gas"),
    "pressure": Var(("time",), "Pa", "pressure of the reactor's gas"),
    "volume": Var(("time",), "m3", "reactor volume"),
    "density": Var(("time",), "kg m-3", "density of the reactor's gas"),
    "entropy": Var(("time",), "J K-1", "total entropy of the reactor contents", "S = m s"),
    "potential": Var(("time",), "J K-1", "potential that grows to its equilibrium maximum",
                     "Phi = S (isolated, constant-pressure), S - H/T (isothermal)"),
    "path_progress": Var(("time",), "1", "progress of the stored sample",
                         "lambda = (Phi - Phi_0) / (Phi_eq - Phi_0)"),
    "mole_fraction": Var(("time", "species"), "1", "mole fraction", "X_k; float32, 5 significant digits"),
    "affinity": Var(("time", "reaction"), "J mol-1", "affinity",
                    "A_j = -sum_k nu_kj mu_k; float32, 5 significant digits"),
    "forward_rate": Var(("time", "reaction"), "mol m-3 s-1", "forward rate of progress",
                        "float32, 4 significant digits"),
    "reverse_rate": Var(("time", "reaction"), "mol m-3 s-1", "reverse rate of progress",
                        "float32, 4 significant digits"),
    "net_rate": Var(("time", "reaction"), "mol m-3 s-1", "net rate of progress",
                    "q_j = forward - reverse; float32, 5 significant digits"),
    "entropy_production": Var(("time", "reaction"), "W m-3 K-1", "entropy production density of each reaction",
                              "sigma_j = A_j q_j / T; float32, 4 significant digits"),
    "entropy_production_total": Var(("time",), "W m-3 K-1", "total entropy production density",
                                    "sigma = sum_j sigma_j"),
    "entropy_produced": Var(("reaction",), "J K-1", "entropy produced by each reaction over the case",
                            "I_j = integral of V sigma_j dt over the full-resolution path"),
    "negative_prefactor": Var(("reaction",), "1", "Arrhenius pre-exponential factor is negative",
                              flags=("positive", "negative")),
    "equilibrium_mole_fraction": Var(("species",), "1", "mole fraction at equilibrium",
                                     "Cantera's equilibrium with the reactor's pair held fixed (UV, HP or TP)"),
    "time_to_progress": Var(("progress_level",), "s", "first time the progress reaches the level"),
    **{name: Var((), units, long_name, _SCALAR_FORMULAS.get(name, "")) for name, (units, long_name) in SCALARS.items()},
    # the steepest-entropy-ascent comparison (sigmagrid.sea)
    "metric": Var(("metric",), None, "steepest-entropy-ascent metric", only=SEA_ONLY),
    "sea_progress": Var(("sea_progress",), "1", "progress lambda of the steepest-entropy-ascent grid",
                        "from sea.start_progress to 1 - 1e-6; not the 0-1 `progress` of progress.nc", only=SEA_ONLY),
    "mode": Var(("mode",), "1", "relaxation mode, slowest first", only=SEA_ONLY),
    "mobility": Var(("metric", "reaction"), "mol m-3 s-1", "constant mobility of the steepest-entropy-ascent metric",
                    "q = M x with x = A/(RT); NaN where the mobility depends on the state", only=SEA_ONLY),
    "fit_quality": Var(("metric",), "1", "weighted coefficient of determination of q against M x on the "
                       "observed path", only=SEA_ONLY),
    "alignment": Var(("metric", "time"), "1", "cosine of the angle between observed rates and steepest ascent "
                     "under the metric", "x.q / (sqrt(q.G.q) sqrt(x.M.x)), G = M^-1", only=SEA_ONLY),
    "entropy_production_ratio": Var(("metric",), "1", "entropy produced on the observed path over the largest at "
                                    "equal cost", only=SEA_ONLY),
    "sea_time": Var(("metric", "sea_progress"), "s", "time of the steepest-entropy-ascent path",
                    "observed time of the start sample plus the path's own clock, integral of tau ds", only=SEA_ONLY),
    "sea_temperature": Var(("metric", "sea_progress"), "K", "temperature of the steepest-entropy-ascent path",
                           only=SEA_ONLY),
    "sea_mole_fraction": Var(("metric", "sea_progress", "species"), "1",
                             "mole fractions of the steepest-entropy-ascent path", only=SEA_ONLY),
    "observed_time": Var(("sea_progress",), "s", "time at which the observed path reaches the progress",
                         only=SEA_ONLY),
    "observed_temperature": Var(("sea_progress",), "K", "temperature of the observed path at the progress",
                                only=SEA_ONLY),
    "path_angle": Var(("metric", "sea_progress"), "rad", "Fisher-Rao angle between observed and "
                      "steepest-ascent mole fractions", "2 arccos(sum_k sqrt(X_k Y_k)), 0 to pi", only=SEA_ONLY),
    "temperature_difference": Var(("metric", "sea_progress"), "K", "steepest-ascent minus observed temperature",
                                  only=SEA_ONLY),
    "largest_path_angle": Var(("metric",), "rad", "largest Fisher-Rao path angle", "max over sea_progress of "
                              "path_angle", only=SEA_ONLY),
    "time_ratio": Var(("metric", "progress_level"), "1", "steepest-ascent over observed time from the start "
                      "progress to the level", "(t_sea(level) - t_sea(start)) / (t_obs(level) - t_obs(start))",
                      only=SEA_ONLY),
    "slow_mode_difference": Var(("metric",), "1", "largest relative difference of the slowest relaxation rates, "
                                "metric linearised at equilibrium against the kinetics", only=SEA_ONLY),
    "relaxation_rates_sea": Var(("mode",), "s-1", "slowest relaxation rates of the onsager steepest-ascent "
                                "dynamics at equilibrium", only=SEA_ONLY),
    "relaxation_rates_kinetics": Var(("mode",), "s-1", "slowest relaxation rates of the kinetics (Cantera "
                                     "reactor Jacobian) at equilibrium", only=SEA_ONLY),
    "arrhenius_reference_mobility": Var(("reaction",), "mol m-3 s-1", "fitted-arrhenius mobility at the "
                                        "reference temperature", "m_j(T) = m_ref,j exp(-b_j (1/T - 1/T_ref))",
                                        only=SEA_ONLY),
    "arrhenius_activation_temperature": Var(("reaction",), "K", "fitted-arrhenius activation temperature b_j",
                                            only=SEA_ONLY),
    "irreversible_entropy_share": Var((), "1", "share of the entropy production of irreversible reactions on the "
                                      "compared part of the observed path",
                                      "integral |sigma_irr| dt / integral sum_j |sigma_j| dt, lambda >= "
                                      "sea.start_progress", only=SEA_ONLY),
    "sea_reaction_included": Var(("reaction",), "1", "reaction takes part in the steepest-ascent dynamics",
                                 flags=("left_out", "included"), only=SEA_ONLY),
    "sea_status": Var(("metric",), None, "status of the steepest-ascent path",
                      "ok, incomplete, failed, budget or skipped", only=SEA_ONLY),
    "sea_reason": Var(("metric",), None, "why a steepest-ascent path is missing or short", only=SEA_ONLY),
    "sea_wall_time": Var(("metric",), "s", "wall time of the steepest-ascent path", only=SEA_ONLY),
    "sea_steps": Var(("metric",), "1", "solver steps of the steepest-ascent path", only=SEA_ONLY),
    "sea_rhs_evaluations": Var(("metric",), "1", "right-hand-side evaluations of the steepest-ascent path's "
                               "integration", only=SEA_ONLY),
    "sea_jacobian_evaluations": Var(("metric",), "1", "Jacobian evaluations of the steepest-ascent path's "
                                    "integration", only=SEA_ONLY),
    "sea_trace_level": Var(("metric",), "1", "amount over total below which the constant mobility was scaled "
                           "like mass action", only=SEA_ONLY),
    "sea_element_error": Var(("metric",), "1", "largest relative element imbalance on the path", only=SEA_ONLY),
    "sea_element_drift_unprojected": Var(("metric",), "1", "largest relative element imbalance before "
                                         "projection onto the element totals", only=SEA_ONLY),
    "sea_energy_error": Var(("metric",), "1", "largest relative change of U or H on the path", only=SEA_ONLY),
    "sea_entropy_decrease": Var(("metric",), "1", "largest decrease of the potential between steps over its "
                                "total rise", only=SEA_ONLY),
    "sea_comparison_wall_time": Var((), "s", "wall time of the whole steepest-entropy-ascent comparison of the "
                                    "case", only=SEA_ONLY),
}

_CASE_ATTRS = {
    **COMMON_ATTRS,
    **_PROVENANCE_ATTRS,
    "case_id": "case id (see `case` of the summary)",
    "label": "case label",
    "reactor": "isolated, constant-pressure or isothermal",
    "composition_name": "mixture name",
    "composition": "initial composition, mole-based",
    "equivalence_ratio": "equivalence ratio, 1",
    "initial_temperature": "initial temperature, K",
    "initial_pressure": "initial pressure, Pa",
    "status": CASE_STATUS,
    "reason": "why the case did not relax (empty when it did)",
    "n_irreversible_reactions": "number of irreversible reactions of the mechanism (-1: not audited)",
    "negative_duplicate_members": "equations of duplicate members with a negative pre-exponential factor",
    "flammability_at_ambient": "screen of the initial mixture at ambient conditions",
    "flammability_note": "why the screen says so",
    "missing_values": "which values are missing (NaN) and why",
    "audit_notes": "warnings about the mechanism and the case",
    "mechanism_path": "path of the mechanism file on the machine that ran the case",
    "mechanism_phase": "phase of the mechanism file used",
    "python_version": "version of Python",
    "numpy_version": "version of numpy",
    "settings_sha256": "sha256 of the stop, solver and storage settings (a rerun with others recomputes)",
    "stored_sample_budget": "most samples this case could store (storage.max_samples, storage.max_bytes), 1",
    "sea_weight": "sea.weight",
    "sea_start_progress": "sea.start_progress, 1",
    "sea_irreversible": "sea.irreversible",
    "sea_rtol": "sea.rtol, 1",
    "sea_atol": "sea.atol",
    "sea_metric_rtol": "relative tolerance of the metric fits, 1",
    "sea_metric_atol": "absolute tolerance of the metric fits",
    "sea_trace_level": "sea.trace_level, 1",
    "sea_mobility_floor": "sea.mobility_floor, 1",
    "sea_skipped_reason": "why the comparison was skipped (empty when it ran)",
    "near_equilibrium_reason": "why the relaxation rates at equilibrium are missing (only then)",
    "near_equilibrium_note": "reactions that carry a slow mode where the metric and the kinetics disagree",
}

_CASE_DIMS = {
    "time": "stored samples of the path (at most storage.max_samples, placed where the path changes)",
    "species": "species of the mechanism",
    "reaction": "reactions of the mechanism",
    "progress_level": "the progress levels 0.5, 0.9, 0.99",
    "metric": "steepest-entropy-ascent metrics of sea.metrics (with sea.enabled)",
    "sea_progress": "the steepest-entropy-ascent progress grid, sea.n_progress levels (with sea.enabled)",
    "mode": "slowest relaxation modes at equilibrium (with sea.enabled)",
}

# ------------------------------------------------------------------------------------ summary

_SUMMARY_VARS = {
    **CASE_COORDS,
    **REACTION_COORDS,
    "entropy_produced": Var(("case", "reaction"), "J K-1", "entropy produced by each reaction over the case",
                            "I_jc"),
    "integrated_share": Var(("case", "reaction"), "1", "integrated share of each reaction in the entropy "
                            "produced", "f_jc = I_jc / sum_i I_ic (sums to 1 per case)"),
    "reason": Var(("case",), None, "why a case did not relax"),
    "missing": Var(("case",), None, "which values of the case are missing (NaN) and why"),
    "audit_notes": Var(("case",), None, "warnings about the mechanism and the case"),
    **{name: Var(("case",), units, long_name, _SCALAR_FORMULAS.get(name, ""))
       for name, (units, long_name) in SCALARS.items()},
    **{f"time_to_{round(100 * level)}pct": Var(("case",), "s", f"time to reach {round(100 * level)} % progress")
       for level in PROGRESS_LEVELS},
    "metric": _CASE_VARS["metric"],
    "progress_level": Var(("progress_level",), "1", "progress level of the time ratios", only=SEA_ONLY),
    **{name: Var(("case", *_CASE_VARS[name].dims), _CASE_VARS[name].units, _CASE_VARS[name].long_name,
                 _CASE_VARS[name].formula, only=SEA_ONLY)
       for name in ("largest_path_angle", "time_ratio", "slow_mode_difference", "fit_quality",
                    "entropy_production_ratio", "sea_status")},
}

_SUMMARY_ATTRS = {**COMMON_ATTRS, **_PROVENANCE_ATTRS}
_SUMMARY_DIMS = {"case": "cases of the grid, in case-id order", "reaction": _CASE_DIMS["reaction"],
                 "metric": _CASE_DIMS["metric"], "progress_level": _CASE_DIMS["progress_level"] + " (with sea.enabled)"}

# ------------------------------------------------------------------------------ progress cube

_PROGRESS_VARS = {
    **CASE_COORDS,
    **REACTION_COORDS,
    "progress": Var(("progress",), "1", "progress of the reactor's potential",
                    "lambda = (Phi - Phi_0) / (Phi_eq - Phi_0), 0 to 1"),
    "species": _CASE_VARS["species"],
    "time": Var(("case", "progress"), "s", "time at which the case reaches the progress level"),
    "temperature": Var(("case", "progress"), "K", "temperature of the reactor's gas"),
    "pressure": Var(("case", "progress"), "Pa", "pressure of the reactor's gas"),
    "mole_fraction": Var(("case", "progress", "species"), "1", "mole fraction"),
    "entropy_production_total": Var(("case", "progress"), "W m-3 K-1", "total entropy production density",
                                    "sigma = sum_j sigma_j"),
    "local_share": Var(("case", "progress", "reaction"), "1", "local share of each reaction in the entropy "
                       "production", "sigma_j / sigma at the level (negative for a reaction that consumes entropy)"),
    "affinity": Var(("case", "progress", "reaction"), "J mol-1", "affinity", "A_j = -sum_k nu_kj mu_k"),
    "net_rate": Var(("case", "progress", "reaction"), "mol m-3 s-1", "net rate of progress", "q_j"),
}
_PROGRESS_ATTRS = {**COMMON_ATTRS, **_GRID_ATTRS}
_PROGRESS_DIMS = {"case": _SUMMARY_DIMS["case"], "progress": "the 0-1 progress grid: progress_grid.points "
                  "cosine-spaced levels plus 0, 0.001, 0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 0.999, 1",
                  "species": _CASE_DIMS["species"], "reaction": _CASE_DIMS["reaction"]}

# ------------------------------------------------------------------------------------ ranking

_RANKING_VARS = {
    **CASE_COORDS,
    **REACTION_COORDS,
    "criterion": Var(("criterion",), None, "ranking criterion", "local, integrated-max, integrated-mean"),
    "integrated_share": _SUMMARY_VARS["integrated_share"],
    "local_share_peak": Var(("case", "reaction"), "1", "largest local share of each reaction along the case",
                            "l_jc = max_t sigma_j(t) / sigma(t) over stored samples with sigma(t) >= negligible x "
                            "max_t sigma(t)"),
    "share_sum": Var(("case",), "1", "sum over reactions of the integrated shares", "sum_j f_jc"),
    "usable": Var(("case",), "1", "case used in the ranking", flags=("left_out", "used")),
    "integrated_share_max": Var(("reaction",), "1", "largest integrated share over the cases", "max_c f_jc"),
    "integrated_share_max_case": Var(("reaction",), None, "case where the largest integrated share occurs"),
    "integrated_share_mean": Var(("reaction",), "1", "mean integrated share over the cases", "mean_c f_jc"),
    "local_share_max": Var(("reaction",), "1", "largest local share over all paths", "max_c l_jc"),
    "local_share_max_case": Var(("reaction",), None, "case where the largest local share occurs"),
    "rank": Var(("criterion", "reaction"), "1", "rank of the reaction under each criterion (1 = most entropy)",
                "NaN for flagged reactions; ties share the better rank"),
    "group_score": Var(("criterion", "reaction"), "1", "score of the reaction's duplicate group under each "
                       "criterion (what cuts use)", "the criterion on the summed sigma and I of the group"),
    "negative_entropy": Var(("reaction",), "1", "reaction consumes entropy in some case: flagged, not ranked",
                            "I_jc < -1e-9 sum_i |I_ic|", flags=("no", "yes")),
    "group_negative_entropy": Var(("reaction",), "1", "the reaction's duplicate group consumes entropy in some case",
                                  flags=("no", "yes")),
    "negative_cases": Var(("reaction",), "1", "number of cases in which the reaction consumes entropy"),
    "most_negative_share": Var(("reaction",), "1", "smallest integrated share over the cases", "min_c f_jc"),
    "flag_reason": Var(("reaction",), None, "why the reaction is flagged",
                       "irreversible, duplicate member or reversible (round-off?); empty when not flagged"),
    "species": Var(("species",), None, "species name", only="ranked with a config"),
    "graph_method": Var(("graph_method",), None, "graph criterion of the species importance", "drg, drgep",
                        only="ranked with a config"),
    "species_importance": Var(("graph_method", "species"), "1", "largest importance of the species over the "
                              "states of the usable cases",
                              "DRG: max over states of the widest path from a target, min of r_AB = sum_i "
                              "|nu_Ai q_i| delta_Bi / sum_i |nu_Ai q_i| on the path; DRGEP: max over states of the "
                              "largest product of r_AB = |sum_i nu_Ai q_i delta_Bi| / max(P_A, C_A) over paths; "
                              "targets 1", only="ranked with a config"),
    "graph_target": Var(("species",), "1", "target species of the graph criteria", flags=("no", "yes"),
                        only="ranked with a config"),
}
_RANKING_ATTRS = {
    **COMMON_ATTRS, **_GRID_ATTRS,
    "negligible_fraction": "reduction.negligible: sigma below this fraction of a case's peak is left out of the "
                           "local share, 1",
    "negative_tolerance": "fraction of a case's sum |I_j| below which a negative I_j flags the reaction, 1",
    "n_cases": "cases in the summary",
    "n_cases_used": "cases used in the ranking",
    "cases_left_out": "ids of the cases left out",
    "graph_targets": "target species of the graph criteria, comma-separated (reduction.targets, or the feed's "
                     "non-inert species and the products reaching a mole fraction of 1e-2 at the end of some case)",
}
_RANKING_DIMS = {"case": _SUMMARY_DIMS["case"], "reaction": _CASE_DIMS["reaction"],
                 "criterion": "the entropy criteria", "species": _CASE_DIMS["species"] + " (ranked with a config)",
                 "graph_method": "the graph criteria drg, drgep (ranked with a config)"}

# -------------------------------------------------------------------------------- validation

_VALIDATION_ERRORS = {
    "ignition_delay_error": Var(("case",), "1", "relative error of the ignition delay",
                                "|tau_cut - tau| / tau; NaN where neither ignites, inf where only one does"),
    "equilibrium_temperature_error": Var(("case",), "K", "absolute error of the equilibrium temperature",
                                         "|T_eq,cut - T_eq|"),
    "entropy_produced_error": Var(("case",), "1", "relative error of the total entropy produced",
                                  "|sum I_cut - sum I| / |sum I|"),
}

_VALIDATION_VARS = {
    **CASE_COORDS,
    "reaction": Var(("reaction",), "1", "reaction index, in the full mechanism, of a reaction the cut keeps"),
    "equation": REACTION_COORDS["equation"],
    **_VALIDATION_ERRORS,
    "cut_ignition_delay": Var(("case",), "s", "ignition delay on the cut"),
    "cut_equilibrium_temperature": Var(("case",), "K", "equilibrium temperature on the cut"),
    "cut_entropy_produced_total": Var(("case",), "J K-1", "entropy produced on the cut"),
    "cut_status": Var(("case",), None, f"status of the case on the cut: {CASE_STATUS}"),
    "cut_failed": Var(("case",), "1", "case fails on the cut (fails, or no longer relaxes)", flags=("no", "yes")),
    "cut_reason": Var(("case",), None, "why the case did not relax on the cut"),
    "cut_case_id": Var(("case",), None, "id of the case in the reduced run"),
    "cut_judged_at_end": Var(("case",), "1", "case relaxed on the full mechanism stops short of strict equilibrium "
                             "on the cut within stop.max_time: judged at its end time, not failed",
                             "temperature and entropy errors then |T_cut(t_end) - T(t_end)| and "
                             "|dPhi_cut(t_end) - dPhi(t_end)| / |dPhi(t_end)| against the full path",
                             flags=("no", "yes")),
    "cut_end_time": Var(("case",), "s", "end time of a case judged at its end time (NaN otherwise)"),
}
_VALIDATION_ATTRS = {
    **COMMON_ATTRS,
    "cut": "cut name (<criterion>-<threshold>)",
    "cut_mechanism": "path of the reduced mechanism",
    "n_species": "species in the cut (-1: does not load)",
    "n_reactions": "reactions in the cut (-1: does not load)",
    "load_error": "why the cut does not load (empty when it does)",
}
_VALIDATION_DIMS = {"case": "the cases rerun on the cut (the grid, or reduction.validation_cases)",
                    "reaction": "the reactions the cut keeps"}

# --------------------------------------------------------------------------------- reduction

_REDUCTION_VARS = {
    "cut": Var(("cut",), None, "cut name"),
    "criterion": Var(("cut",), None, "ranking criterion of the cut"),
    "threshold": Var(("cut",), "1", "threshold of the cut"),
    "n_species": Var(("cut",), "1", "species in the cut"),
    "n_reactions": Var(("cut",), "1", "reactions in the cut"),
    "failed_cases": Var(("cut",), "1", "cases that fail on the cut"),
    "judged_at_end_cases": Var(("cut",), "1", "cases that stop short of strict equilibrium on the cut, judged at "
                               "their end time (not failures)"),
    "largest_error_ratio": Var(("cut",), "1", "largest error over its tolerance, the worst of the three errors",
                               "max_k (largest error_k / tolerance_k); <= 1 within tolerances"),
    "smallest_of_criterion": Var(("cut",), "1", "the smallest cut of its criterion within tolerances",
                                 flags=("no", "yes")),
    "within_tolerances": Var(("cut",), "1", "validated, no failed case, largest errors within tolerances",
                             flags=("no", "yes")),
    **{f"{k}_max": Var(("cut",), v.units, f"largest {v.long_name}", v.formula) for k, v in _VALIDATION_ERRORS.items()},
    **{f"{k}_median": Var(("cut",), v.units, f"median {v.long_name}", v.formula)
       for k, v in _VALIDATION_ERRORS.items()},
    **{f"case_{k}": Var(("cut", "case"), v.units, v.long_name, v.formula, only="with reduction.validate")
       for k, v in _VALIDATION_ERRORS.items()},
    "case_cut_failed": Var(("cut", "case"), "1", _VALIDATION_VARS["cut_failed"].long_name,
                           flags=("no", "yes"), only="with reduction.validate"),
    **{k: Var(v.dims, v.units, v.long_name, v.formula, v.flags, only="with reduction.validate")
       for k, v in CASE_COORDS.items()},
}
_REDUCTION_ATTRS = {
    **COMMON_ATTRS,
    "smallest_within_tolerances": "name of the smallest cut within tolerances (empty: none)",
    "smallest_by_criterion": "per criterion the smallest cut within tolerances, 'criterion: cut' separated by "
                             "'; ' (none: no cut of it within tolerances)",
    "tolerance_ignition_delay_error": "reduction.max_ignition_delay_error, 1",
    "tolerance_equilibrium_temperature_error": "reduction.max_equilibrium_temperature_error, K",
    "tolerance_entropy_produced_error": "reduction.max_entropy_produced_error, 1",
}
_REDUCTION_DIMS = {"cut": "the cuts of reduction.criteria, each at its thresholds (reduction.thresholds, "
                         "species_thresholds or thresholds_by_criterion)",
                   "case": "the validated cases (with reduction.validate)"}

VARIABLES = {"case": _CASE_VARS, "summary": _SUMMARY_VARS, "progress": _PROGRESS_VARS, "ranking": _RANKING_VARS,
             "validation": _VALIDATION_VARS, "reduction": _REDUCTION_VARS}
ATTRIBUTES = {"case": _CASE_ATTRS, "summary": _SUMMARY_ATTRS, "progress": _PROGRESS_ATTRS, "ranking": _RANKING_ATTRS,
              "validation": _VALIDATION_ATTRS, "reduction": _REDUCTION_ATTRS}
DIMENSIONS = {"case": _CASE_DIMS, "summary": _SUMMARY_DIMS, "progress": _PROGRESS_DIMS, "ranking": _RANKING_DIMS,
              "validation": _VALIDATION_DIMS, "reduction": _REDUCTION_DIMS}

TITLES = {"case": "Case file `results/cases/<case_id>.nc`", "summary": "Grid summary `results/summary.nc`",
          "progress": "Progress cube `results/progress.nc`", "ranking": "Ranking `results/ranking.nc`",
          "reduction": "Cuts `results/reduction.nc`", "validation": "Validation of a cut "
          "`results/reduced/<cut>/validation.nc`"}

#: Published sources of the quantities, per file (the ``references`` attribute).
REFERENCES = {
    "case": "S. R. de Groot and P. Mazur, Non-Equilibrium Thermodynamics, North-Holland (1962); "
            "D. G. Goodwin et al., Cantera, https://www.cantera.org; M. Kloewer et al., Compressing atmospheric "
            "data into its real information content, Nature Computational Science 1, 713 (2021)",
    "summary": "S. R. de Groot and P. Mazur, Non-Equilibrium Thermodynamics, North-Holland (1962)",
    "progress": "S. R. de Groot and P. Mazur, Non-Equilibrium Thermodynamics, North-Holland (1962)",
    "ranking": "M. Kooshkbaghi, C. E. Frouzakis, K. Boulouchos and I. V. Karlin, Entropy production analysis "
               "for mechanism reduction, Combust. Flame 161, 1507 (2014); T. Lu and C. K. Law, A directed relation "
               "graph method for mechanism reduction, Proc. Combust. Inst. 30, 1333 (2005); P. Pepiot-Desjardins "
               "and H. Pitsch, An efficient error-propagation-based reduction method for large chemical kinetic "
               "mechanisms, Combust. Flame 154, 67 (2008)",
    "reduction": "M. Kooshkbaghi et al., Combust. Flame 161, 1507 (2014); T. Lu and C. K. Law, Proc. Combust. "
                 "Inst. 30, 1333 (2005); P. Pepiot-Desjardins and H. Pitsch, Combust. Flame 154, 67 (2008)",
    "validation": "M. Kooshkbaghi et al., Combust. Flame 161, 1507 (2014)",
}


# ------------------------------------------------------------------------------- write / read


def history(action: str) -> str:
    """``history`` text: the UTC time, the command line of this process and what it did."""
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    program = sys.argv[0].rsplit("/", 1)[-1] if sys.argv and sys.argv[0] else "python"
    if program == "__main__.py":  # python -m sigmagrid
        program = "sigmagrid"
    return f"{now}: {shlex.join([program, *sys.argv[1:]])} ({action})"


def finish(ds, kind: str, action: str):
    """``ds`` with the attributes of format 1.0 of a ``kind`` file (one of :data:`FILES`).

    Sets ``units`` (removed on text), ``long_name`` and ``flag_values``/``flag_meanings`` of every
    described variable from :data:`VARIABLES`, and the global ``Conventions``, format version,
    ``history`` (UTC time, command, ``action``) and ``references``. Variables the table lacks
    keep what the writer gave them; :func:`undescribed` lists them (the tests require none).
    """
    from .store import CONVENTIONS

    table = VARIABLES[kind]
    for name, var in ds.variables.items():
        entry = table.get(str(name))
        if entry is None:
            continue
        attrs = dict(var.attrs)
        attrs["long_name"] = entry.long_name
        if entry.units is None or var.dtype.kind in "OUS":
            attrs.pop("units", None)
        else:
            attrs["units"] = entry.units
        if entry.flags:
            attrs["flag_values"] = np.arange(len(entry.flags), dtype=var.dtype if var.dtype.kind in "iu" else np.int8)
            attrs["flag_meanings"] = " ".join(entry.flags)
        var.attrs = attrs
    ds.attrs.pop("institution", None)
    ds.attrs.update({"Conventions": CONVENTIONS, VERSION_ATTRIBUTE: FORMAT_VERSION,
                     "history": history(action), "references": REFERENCES[kind]})
    return ds


def undescribed(ds, kind: str) -> list[str]:
    """Variables, dimensions and global attributes of ``ds`` that the ``kind`` tables do not
    describe, or describe with other units or dimensions (an empty list for a conforming file)."""
    table, out = VARIABLES[kind], []
    for name, var in ds.variables.items():
        entry = table.get(str(name))
        if entry is None:
            out.append(f"variable {name}")
            continue
        if tuple(var.dims) != entry.dims:
            out.append(f"variable {name}: dims {tuple(var.dims)}, described {entry.dims}")
        if var.attrs.get("units") != entry.units and not (entry.units is not None and var.dtype.kind in "OUS"):
            out.append(f"variable {name}: units {var.attrs.get('units')!r}, described {entry.units!r}")
    out += [f"dimension {d}" for d in ds.dims if d not in DIMENSIONS[kind]]
    out += [f"attribute {a}" for a in ds.attrs if a not in ATTRIBUTES[kind]]
    return out


def check(attrs, path, kind: str = "") -> None:
    """Refuse a file whose format is not 1.x: raises :class:`FormatError` with one line naming the
    file, its version and what to do. ``attrs``: the file's global attributes (a mapping)."""
    found = attrs.get(VERSION_ATTRIBUTE) if hasattr(attrs, "get") else None
    what = f"{kind} file " if kind else ""
    if found is None:
        raise FormatError(f"{what}'{path}' was written before sigmagrid format {FORMAT_VERSION} (no "
                          f"{VERSION_ATTRIBUTE} attribute): recompute it with this version")
    if str(found).split(".")[0] != FORMAT_VERSION.split(".")[0]:
        raise FormatError(f"{what}'{path}' is sigmagrid format {found}, this version reads format "
                          f"{FORMAT_VERSION.split('.')[0]}.x: recompute it with this version")


# ------------------------------------------------------------------------------------- docs


def _cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def markdown() -> str:
    """``docs/file-format.md``, generated from the tables (``python -m sigmagrid.fileformat``)."""
    lines = [
        f"# sigmagrid file format {FORMAT_VERSION}",
        "",
        "<!-- generated from src/sigmagrid/fileformat.py by `python -m sigmagrid.fileformat > "
        "docs/file-format.md`; a test fails when the two differ -->",
        "",
        "Every file is netCDF-4 and follows the CF 1.10 conventions, with one documented exception: the "
        "elapsed-time axis `time` of a case file is in plain seconds without a reference date (CF section "
        "4.4), so that readers do not decode it to nanosecond calendar dates. Every number carries `units` "
        "(UDUNITS-2 spelling, `1` for dimensionless); text variables carry none. Integer codes carry "
        "`flag_values` and `flag_meanings`. Two of compliance-checker's recommendations (not requirements) "
        "are not followed: the per-sample arrays keep `time` first, as (time, reaction), so that a sample "
        "is contiguous (CF section 2.4 recommends other dimensions left of T), and netCDF-C's own "
        "`_QuantizeBitRoundNumberOfSignificantBits` attribute begins with an underscore (section 2.3).",
        "",
        f"The global attribute `{VERSION_ATTRIBUTE}` holds the layout version, \"{FORMAT_VERSION}\". "
        "sigmagrid reads files of the same major version and refuses any other, or a file without the "
        "attribute, with the advice to recompute it. A minor version adds variables or attributes; a major "
        "version renames, removes or changes the meaning of one.",
        "",
        "**Reactions** are addressed by `reaction`, an integer index: the reaction's position (from 0, "
        "Cantera's order) in the mechanism file the grid ran on. A reduced mechanism written by "
        "`sigmagrid cut` records each reaction's index in the full mechanism (its `source-reaction-index` "
        "field), so the files of a cut use the full mechanism's indices. `equation`, `duplicate_group` and "
        "`reversible` are auxiliary coordinates along `reaction`; duplicate reactions share an equation, "
        "never an index.",
        "",
        "**Shares**: the *integrated share* f_jc = I_jc / sum_i I_ic is the reaction's part of the entropy "
        "produced over a whole case (`integrated_share`); the *local share* sigma_j / sigma is its part of "
        "the entropy production rate at one state (`local_share`, on the progress grid); "
        "`local_share_peak` is the largest local share along a case.",
        "",
        "**Progress grids**: `progress` (progress.nc) runs from 0 to 1; `sea_progress` (case files with "
        "the steepest-entropy-ascent comparison) runs from `sea.start_progress`; `path_progress` is the "
        "progress of each stored sample of a case.",
    ]
    for kind in FILES:
        lines += ["", f"## {TITLES[kind]}", "", "### Dimensions", "", "| dimension | meaning |", "|---|---|"]
        lines += [f"| `{d}` | {_cell(m)} |" for d, m in DIMENSIONS[kind].items()]
        lines += ["", "### Variables", "", "| variable | dimensions | units | meaning | formula, notes |",
                  "|---|---|---|---|---|"]
        for name, v in VARIABLES[kind].items():
            notes = "; ".join(x for x in (v.formula,
                                          ("flags: " + ", ".join(f"{i} {m}" for i, m in enumerate(v.flags)))
                                          if v.flags else "", v.only) if x)
            dims = ", ".join(v.dims) if v.dims else "(scalar)"
            units = "(text)" if v.units is None else f"`{v.units}`"
            lines.append(f"| `{name}` | {dims} | {units} | {_cell(v.long_name)} | {_cell(notes)} |")
        lines += ["", "### Global attributes", "", "| attribute | meaning |", "|---|---|"]
        lines += [f"| `{a}` | {_cell(m)} |" for a, m in ATTRIBUTES[kind].items()]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    sys.stdout.write(markdown())
