"""Ranking of reactions by the entropy they produce across a grid, reduced mechanisms, their cost.

Scores of reaction j, all dimensionless:

* integrated share in case c, f_jc = I_jc / sum_i I_ic, with I_jc the entropy produced by j over the
  case (J/K, from the full-resolution path). Negative for a reaction that consumes entropy; the
  shares of a case still sum to 1.
* local share sigma_j(t) / sigma(t) at one state; its peak in case c, l_jc = max over stored
  samples t of sigma_j(t) / sigma(t) (``local_share_peak``), taken only where
  sigma(t) is not negligible: sigma(t) >= ``negligible`` x (largest sigma of that case), with
  ``negligible`` = 1e-3 by default. This is the entropy-production-analysis criterion for mechanism
  reduction: keep a reaction whose contribution to the entropy production rate reaches the
  threshold somewhere along some path (Kooshkbaghi, Frouzakis, Boulouchos and Karlin,
  "Entropy production analysis for mechanism reduction", Combust. Flame 161 (2014) 1507-1515).
  The cut-off keeps the ratio away from the end of the path where sigma -> 0 and sigma_j / sigma
  is the ratio of two vanishing numbers.

Criteria (how the per-case scores are combined over the cases): ``local`` (largest l_jc),
``integrated-max`` (largest f_jc), ``integrated-mean`` (mean of f_jc, every usable case weighted
equally).

Decisions are taken per duplicate group (a physical reaction split into duplicate members, which
Cantera only loads together): the group's score is computed from the summed sigma and I of its
members. A group that consumes entropy in some case (I < -1e-9 x sum |I| of the case; an
irreversible reaction, or a group with a negative pre-exponential member) is flagged, never
ranked; by default it is kept in every cut (``reduction.negative_entropy: keep``), because a
criterion based on entropy production cannot judge it.
"""

from __future__ import annotations

import copy
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import cantera as ct
import numpy as np
import pandas as pd
import xarray as xr

from . import criteria, fileformat, grid as grid_mod, mechanism, store
from .config import SPECIES_CRITERIA, cuts
from .errors import InputError

#: The entropy criteria (the ``criterion`` coordinate of the ranking); the species criteria are
#: in :mod:`sigmagrid.criteria`.
CRITERIA = ("local", "integrated-max", "integrated-mean")
ALL_CRITERIA = CRITERIA + SPECIES_CRITERIA
#: Negative entropy produced beyond this fraction (1) of a case's sum |I_j| flags a reaction.
NEGATIVE_TOLERANCE = 1e-9
DEFAULT_INERT = ("N2", "AR", "HE", "Ar", "He")


# --------------------------------------------------------------------------------------- scores


def integrated_shares(produced: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-case integrated shares f_jc = I_jc / sum_j I_jc (1) and the totals (J/K).

    ``produced`` is (case, reaction). Rows whose total is not finite and positive get NaN shares.
    """
    produced = np.asarray(produced, dtype=float)
    totals = produced.sum(axis=1)
    usable = np.isfinite(totals) & (totals > 0)
    shares = np.full(produced.shape, np.nan)
    shares[usable] = produced[usable] / totals[usable, None]
    return shares, totals


def local_shares(sigma: np.ndarray, negligible: float = 1e-3) -> np.ndarray:
    """Largest sigma_j / sigma over the samples where sigma is not negligible (1), per column.

    Parameters
    ----------
    sigma : (time, reaction) entropy production density of each reaction, W/(m3 K).
    negligible : samples with sum_j sigma_j below ``negligible`` x its largest value are left out.

    Returns NaN for every column when no sample has a positive total.
    """
    sigma = np.asarray(sigma, dtype=float)
    total = sigma.sum(axis=1)
    finite = np.isfinite(total)
    if not finite.any() or np.nanmax(total) <= 0:
        return np.full(sigma.shape[1], np.nan)
    peak = total[finite].max()
    keep = finite & (total >= negligible * peak) & (total > 0)
    return (sigma[keep] / total[keep, None]).max(axis=0)


def group_matrix(duplicate_group: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(reaction, group) 0/1 matrix and each reaction's group column, from duplicate-group ids."""
    ids, column = np.unique(np.asarray(duplicate_group), return_inverse=True)
    matrix = np.zeros((column.size, ids.size))
    matrix[np.arange(column.size), column] = 1.0
    return matrix, column


@dataclass
class Scores:
    """Per-case scores of reactions and of their duplicate groups."""

    integrated: np.ndarray  # (case, reaction)
    local: np.ndarray  # (case, reaction)
    group_integrated: np.ndarray  # (case, group)
    group_local: np.ndarray  # (case, group)
    totals: np.ndarray  # (case,) J/K
    negative: np.ndarray  # (case, reaction) bool: consumes entropy beyond the tolerance
    group_negative: np.ndarray  # (case, group) bool


def _negative(produced: np.ndarray) -> np.ndarray:
    scale = np.nansum(np.abs(produced), axis=1, keepdims=True)
    return produced < -NEGATIVE_TOLERANCE * np.where(scale > 0, scale, np.inf)


def score_cases(produced: np.ndarray, sigmas: list[np.ndarray | None], duplicate_group: np.ndarray,
                negligible: float = 1e-3) -> Scores:
    """Integrated and local shares of every case, per reaction and per duplicate group.

    produced : (case, reaction) J/K; sigmas : per case a (time, reaction) array in W/(m3 K), or
    None for a case without a usable path.
    """
    produced = np.asarray(produced, dtype=float)
    groups, _ = group_matrix(duplicate_group)
    shares, totals = integrated_shares(produced)
    group_produced = produced @ groups
    nc, nr = produced.shape
    local = np.full((nc, nr), np.nan)
    group_local = np.full((nc, groups.shape[1]), np.nan)
    for c, sigma in enumerate(sigmas):
        if sigma is None or not np.isfinite(shares[c]).all():
            continue
        local[c] = local_shares(sigma, negligible)
        group_local[c] = local_shares(sigma @ groups, negligible)
    return Scores(integrated=shares, local=local, group_integrated=shares @ groups, group_local=group_local,
                  totals=totals, negative=_negative(produced), group_negative=_negative(group_produced))


def _rank_desc(values: np.ndarray, eligible: np.ndarray) -> np.ndarray:
    """Rank 1 for the largest eligible value (ties share the better rank); NaN where not eligible."""
    s = pd.Series(np.where(eligible, values, np.nan))
    return s.rank(ascending=False, method="min", na_option="keep").to_numpy(float)


def _arg(values: np.ndarray, fn) -> tuple[np.ndarray, np.ndarray]:
    """Column-wise nan-max (or nan-mean) over cases and, for the max, the row where it occurs."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        value = fn(values, axis=0)
    where = np.full(values.shape[1], -1)
    if fn is np.nanmax:
        ok = np.isfinite(values).any(axis=0)
        where[ok] = np.nanargmax(np.where(np.isfinite(values), values, -np.inf)[:, ok], axis=0)
    return value, where


def rank(summary: xr.Dataset, case_files: list[str | Path], negligible: float = 1e-3,
         report: Callable[[str], None] | None = None, config: dict | None = None) -> xr.Dataset:
    """Rank the reactions of a grid (the ranking.nc Dataset).

    Parameters
    ----------
    summary : the grid summary (``results/summary.nc``), dims case x reaction.
    case_files : the case files; their stored ``entropy_production`` gives the local shares.
    The reaction coordinates (index, equation, duplicate group, reversibility) are the summary's.
    negligible : 1, see :func:`local_shares`.
    config : a validated config; with it the species are ranked too, by DRG and DRGEP from the
    targets of ``reduction.targets`` (see :mod:`sigmagrid.criteria`).

    Usable cases: status not ``failed`` and a positive, finite total of entropy produced.
    """
    case_ids = [str(c) for c in summary["case"].values]
    by_id = {Path(p).stem: Path(p) for p in case_files}
    produced = summary["entropy_produced"].values.astype(float)
    reactions = summary["reaction"].values
    nr = len(reactions)
    status = summary["status"].values.astype(str)
    reversible = summary["reversible"].values.astype(bool)
    dup = summary["duplicate_group"].values.astype(int)
    sigmas, readable = [], False
    for n, cid in enumerate(case_ids, 1):
        path = by_id.get(cid)
        sigma = None
        if path is not None and status[n - 1] != "failed":
            try:
                with xr.open_dataset(path) as whole:  # only what the scores need
                    fileformat.check(whole.attrs, path, "case")
                    ds = whole[["entropy_production"]].load()
                if np.array_equal(ds["reaction"].values, reactions):
                    sigma = ds["entropy_production"].values.astype(float)
                    readable = True
            except Exception:  # noqa: BLE001 - a damaged case is left out, and counted
                sigma = None
        sigmas.append(sigma)
        if report and (n % 200 == 0 or n == len(case_ids)):
            report(f"scored {n}/{len(case_ids)} cases")
    if not readable:
        raise ValueError("no readable case file with a usable path: nothing to rank")
    usable = (status != "failed") & np.isfinite(produced).all(axis=1) & (produced.sum(axis=1) > 0) \
        & np.array([s is not None for s in sigmas])
    sc = score_cases(np.where(usable[:, None], produced, np.nan), [s if u else None for s, u in zip(sigmas, usable)],
                     dup, negligible)
    groups, column = group_matrix(dup)
    used = np.flatnonzero(usable)
    sub = lambda a: a[used]  # noqa: E731

    int_max, int_max_case = _arg(sub(sc.integrated), np.nanmax)
    int_mean, _ = _arg(sub(sc.integrated), np.nanmean)
    loc_max, loc_max_case = _arg(sub(sc.local), np.nanmax)
    g_int_max, _ = _arg(sub(sc.group_integrated), np.nanmax)
    g_int_mean, _ = _arg(sub(sc.group_integrated), np.nanmean)
    g_loc_max, _ = _arg(sub(sc.group_local), np.nanmax)
    negative_cases = sub(sc.negative).sum(axis=0)
    group_negative = sub(sc.group_negative).any(axis=0)[column]
    flagged = negative_cases > 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        most_negative = np.nanmin(sub(sc.integrated), axis=0) if used.size else np.full(nr, np.nan)
    eligible = ~flagged & ~group_negative
    case_of = lambda idx: np.array([case_ids[used[i]] if i >= 0 else "" for i in idx], dtype=str)  # noqa: E731
    kind = np.array(["" if not flagged[j] else
                     ("irreversible" if not reversible[j] else
                      ("duplicate member" if (column == column[j]).sum() > 1 else "reversible (round-off?)"))
                     for j in range(nr)], dtype=str)

    def var(dims, values, units, long_name, **extra):
        if np.asarray(values).dtype.kind in "US":  # text: CF gives it no units
            return (dims, values, {"long_name": long_name, **extra})
        return (dims, values, {"units": units, "long_name": long_name, **extra})

    group_score = np.stack([g_loc_max[column], g_int_max[column], g_int_mean[column]])
    flag = {"flag_values": np.array([0, 1], dtype=np.int8)}
    data = {
        "integrated_share": var(("case", "reaction"), sc.integrated, "1",
                                "integrated share I_jc / sum_j I_jc of each reaction in each case (sums to 1)"),
        "local_share_peak": var(("case", "reaction"), sc.local, "1",
                                "largest sigma_j / sigma along the case where sigma is not negligible"),
        "share_sum": var(("case",), np.where(usable, np.nansum(sc.integrated, axis=1), np.nan), "1", "sum over reactions of the integrated shares"),
        "usable": var(("case",), usable.astype(np.int8), "1", "case used in the ranking",
                      flag_meanings="left_out used", **flag),
        "integrated_share_max": var(("reaction",), int_max, "1", "largest integrated share over the cases"),
        "integrated_share_max_case": var(("reaction",), case_of(int_max_case), "1",
                                         "case where the largest integrated share occurs"),
        "integrated_share_mean": var(("reaction",), int_mean, "1", "mean integrated share over the cases"),
        "local_share_max": var(("reaction",), loc_max, "1",
                               "largest local share sigma_j / sigma over all paths (sigma not negligible)"),
        "local_share_max_case": var(("reaction",), case_of(loc_max_case), "1", "case where the largest local share occurs"),
        "rank": var(("criterion", "reaction"),
                    np.stack([_rank_desc(v, eligible) for v in (loc_max, int_max, int_mean)]), "1",
                    "rank of the reaction under each criterion (1 = most entropy); NaN for flagged reactions"),
        "group_score": var(("criterion", "reaction"), group_score, "1",
                           "score of the reaction's duplicate group under each criterion (what cuts use)"),
        "negative_entropy": var(("reaction",), flagged.astype(np.int8), "1",
                                "reaction consumes entropy (I_jc < 0) in some case: flagged, not ranked",
                                flag_meanings="no yes", **flag),
        "group_negative_entropy": var(("reaction",), group_negative.astype(np.int8), "1",
                                      "the reaction's duplicate group consumes entropy in some case",
                                      flag_meanings="no yes", **flag),
        "negative_cases": var(("reaction",), negative_cases.astype(np.int32), "1",
                              "number of cases in which the reaction consumes entropy"),
        "most_negative_share": var(("reaction",), most_negative, "1", "smallest integrated share over the cases"),
        "flag_reason": var(("reaction",), kind, "1", "why the reaction is flagged"),
    }
    coords = {c: summary.coords[c] for c in summary.coords if summary.coords[c].dims == ("case",)}
    coords.update({**store.reaction_coords_of(summary),
                   "criterion": ("criterion", np.array(CRITERIA, dtype=str), {"long_name": "ranking criterion"})})
    attrs = {k: summary.attrs[k] for k in ("mechanism", "mechanism_sha256", "study") if k in summary.attrs}
    if config is not None:
        gas = mechanism.load(mechanism.resolve(config["mechanism"]), phase=config.get("phase"))
        importance, targets = criteria.importance_over_cases(
            gas, [by_id.get(cid) for cid in case_ids], list(usable), reduction_settings(config)["targets"],
            feed_species(config), inert_species(gas, config), negligible, report)
        data["species_importance"] = var(("graph_method", "species"), importance, "1",
                                         "largest importance of the species over the states of the usable cases")
        data["graph_target"] = var(("species",), np.isin(gas.species_names, targets).astype(np.int8), "1",
                                   "target species of the graph criteria", flag_meanings="no yes", **flag)
        coords["species"] = ("species", np.array(gas.species_names, dtype=str), {"long_name": "species name"})
        coords["graph_method"] = ("graph_method", np.array(criteria.GRAPH_METHODS, dtype=str),
                                  {"long_name": "graph criterion of the species importance"})
        attrs["graph_targets"] = ", ".join(targets)
    ranking = xr.Dataset(data, coords=coords, attrs={
        "title": f"sigmagrid reaction ranking {attrs.get('study', '')}".strip(), "source": "sigmagrid",
        "negligible_fraction": negligible,
        "negative_tolerance": NEGATIVE_TOLERANCE, "n_cases": len(case_ids), "n_cases_used": int(usable.sum()),
        "cases_left_out": ", ".join(np.array(case_ids)[~usable]),
        "comment": "local share from the stored samples of each case file; integrated share from the "
                   "full-resolution integral", **attrs})
    return fileformat.finish(ranking, "ranking", f"ranked from {len(case_ids)} cases of the summary")


def ranking_table(ranking: xr.Dataset) -> pd.DataFrame:
    """ranking.csv: one row per reaction, best first under the local criterion, flagged ones last."""
    r = ranking
    ranks = {c: r["rank"].sel(criterion=c).values for c in CRITERIA}
    labels = dict(zip(r["case"].values.astype(str), r["label"].values.astype(str))) if "label" in r.coords else {}

    def label_of(name):
        return [labels.get(c, c) for c in r[name].values.astype(str)]

    df = pd.DataFrame({
        "reaction": r["reaction"].values.astype(int),
        "equation": r["equation"].values.astype(str),
        "rank_local [1]": pd.array(np.where(np.isfinite(ranks["local"]), ranks["local"], np.nan), dtype="Int64"),
        "rank_integrated_max [1]": pd.array(ranks["integrated-max"], dtype="Int64"),
        "rank_integrated_mean [1]": pd.array(ranks["integrated-mean"], dtype="Int64"),
        "local_share_max [1]": r["local_share_max"].values,
        "local_share_max_case": r["local_share_max_case"].values.astype(str),
        "local_share_max_label": label_of("local_share_max_case"),
        "integrated_share_max [1]": r["integrated_share_max"].values,
        "integrated_share_max_case": r["integrated_share_max_case"].values.astype(str),
        "integrated_share_max_label": label_of("integrated_share_max_case"),
        "integrated_share_mean [1]": r["integrated_share_mean"].values,
        "reversible": r["reversible"].values.astype(bool),
        "duplicate_group": r["duplicate_group"].values,
        "negative_entropy": r["negative_entropy"].values.astype(bool),
        "negative_cases": r["negative_cases"].values,
        "most_negative_share [1]": r["most_negative_share"].values,
        "flag_reason": r["flag_reason"].values.astype(str),
    })
    order = np.lexsort((df.index.to_numpy(), df["rank_local [1]"].to_numpy(float, na_value=np.inf)))
    return df.iloc[order].reset_index(drop=True)


def write_ranking(summary_path, case_files, table_path, netcdf_path, negligible: float = 1e-3,
                  report: Callable[[str], None] | None = None, config: dict | None = None) -> xr.Dataset:
    """Rank and write ``ranking.csv`` and ``ranking.nc`` atomically (species too, given ``config``)."""
    summary = store.open_checked(summary_path, "summary")
    ranking = rank(summary, case_files, negligible, report, config)
    store.write_atomic(ranking, netcdf_path)
    store.write_text_atomic(ranking_table(ranking).to_csv(index=False, float_format="%.8g"), table_path)
    return ranking


# ------------------------------------------------------------------------------------------ cuts


def reduction_settings(config: dict) -> dict:
    """The ``reduction`` section of a validated config (defaults filled in by config.validate)."""
    return config["reduction"]


def kept_reactions(ranking: xr.Dataset, criterion: str, threshold: float, negative: str = "keep",
                   gas: ct.Solution | None = None, always: set[str] = frozenset(), sieve_share: float = 1e-3) -> np.ndarray:
    """Boolean mask of the reactions a cut keeps.

    Species criteria (``drg``, ``drgep``, ``drgep-sieve``) need ``gas`` (the full mechanism) and
    the species every cut keeps (``always``); see :mod:`sigmagrid.criteria`. For the entropy
    criteria: a duplicate group is kept when its score (clipped at 0 below, NaN counted as 0) is at or above
    the threshold, so a threshold of 0 keeps every reaction and a higher threshold keeps a subset
    of a lower one. Groups that consume entropy follow ``negative`` (``keep`` or ``drop``).
    """
    if criterion not in ALL_CRITERIA:
        raise InputError("reduction.criteria", f"{criterion!r} is not a criterion; allowed: {', '.join(ALL_CRITERIA)}")
    if criterion in SPECIES_CRITERIA:
        if "species_importance" not in ranking:
            raise InputError("--ranking", "holds no species importance: rank with --config to use "
                                          f"the criterion {criterion}")
        method = "drgep" if criterion == criteria.COMBINED else criterion
        importance = ranking["species_importance"].sel(graph_method=method).values.astype(float)
        keep = criteria.species_cut(gas, importance, threshold, always)
        if criterion == criteria.COMBINED:
            keep &= kept_reactions(ranking, "local", sieve_share, negative)
        return keep
    score = np.nan_to_num(ranking["group_score"].sel(criterion=criterion).values.astype(float), nan=0.0)
    score = np.clip(score, 0.0, None)
    keep = score >= threshold
    # a duplicate group is one physical reaction: its members are decided together; a member that
    # consumes entropy inside a group that does not (a negative pre-exponential fit) follows its group
    bad = ranking["group_negative_entropy"].values.astype(bool)
    keep = np.where(bad, negative == "keep", keep)
    return keep


def feed_species(config: dict) -> set[str]:
    """Species of every initial mixture of the config (fuel, oxidizer, explicit compositions)."""
    names: set[str] = set()
    feed = config.get("feed")
    if feed:
        names |= set(grid_mod.parse_composition(feed["fuel"], "feed.fuel"))
        names |= set(grid_mod.parse_composition(feed["oxidizer"], "feed.oxidizer"))
    for i, entry in enumerate(config.get("compositions", [])):
        amounts = grid_mod.parse_composition(entry["composition"], f"compositions[{i}].composition")
        names |= {k for k, v in amounts.items() if v > 0}
    return names


def inert_species(gas: ct.Solution, config: dict) -> set[str]:
    """The config's ``inert`` species, or the usual diluents (N2, Ar, He) the mechanism has."""
    inert = config.get("inert")
    return set(inert) if inert is not None else {s for s in DEFAULT_INERT if s in gas.species_names}


def always_kept(gas: ct.Solution, config: dict) -> set[str]:
    """Species every cut keeps: the feed, the inert diluents, ``reduction.keep_species`` and the
    species that act only as colliders (third-body efficiencies)."""
    return (feed_species(config) | inert_species(gas, config) | set(reduction_settings(config).get("keep_species", []))
            | criteria.third_body_only(gas))


def species_to_keep(gas: ct.Solution, keep: np.ndarray, config: dict) -> list[str]:
    """Species of the kept reactions, plus feed species, inert species and ``reduction.keep_species``.

    In the mechanism's own order. A named third body of a falloff reaction ("(+AR)") counts as a
    species of that reaction.
    """
    wanted = set(feed_species(config)) | inert_species(gas, config)
    wanted |= set(reduction_settings(config).get("keep_species", []))
    unknown = sorted(wanted - set(gas.species_names))
    if unknown:
        raise InputError("reduction.keep_species" if set(unknown) & set(reduction_settings(config).get("keep_species", []))
                         else "inert", f"unknown species {', '.join(unknown)} for this mechanism")
    for j in np.flatnonzero(keep):
        r = gas.reaction(int(j))
        wanted |= set(r.reactants) | set(r.products)
        tb = getattr(r, "third_body", None)
        if tb is not None and tb.name not in ("M", ""):
            wanted.add(tb.name)
    return [s for s in gas.species_names if s in wanted]


def reduced_solution(path: str | Path, keep: np.ndarray, species: list[str], name: str = "reduced") -> ct.Solution:
    """A Cantera Solution with the kept reactions and species of the mechanism file ``path``.

    Third-body efficiencies of species that are not kept are dropped: they multiply a
    concentration that is zero, and a file that names absent species does not load everywhere.
    """
    gas = mechanism.load(Path(path))  # a fresh copy: the efficiencies are edited in place below
    source = mechanism.source_indices(gas)
    kept_species = set(species)
    reactions = []
    for j in np.flatnonzero(keep):
        r = gas.reaction(int(j))
        # the files of the cut then use the full mechanism's reaction indices
        r.update_user_data({mechanism.SOURCE_INDEX_FIELD: int(source[j])})
        tb = getattr(r, "third_body", None)
        if tb is not None and tb.efficiencies:
            tb.efficiencies = {k: v for k, v in tb.efficiencies.items() if k in kept_species}
        reactions.append(r)
    # a declared duplicate whose partners were all cut is now unique; other readers refuse the flag
    def sides(r):
        return frozenset([tuple(sorted(r.reactants.items())), tuple(sorted(r.products.items()))])

    count: dict = {}
    for r in reactions:
        count[sides(r)] = count.get(sides(r), 0) + 1
    for r in reactions:
        if r.duplicate and count[sides(r)] == 1:
            r.duplicate = False
    transport = gas.transport_model if gas.transport_model not in ("none", "None", "", None) else None
    kwargs = {"transport_model": transport} if transport else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = ct.Solution(thermo=gas.thermo_model, kinetics=gas.kinetics_model, name=name,
                          species=[gas.species(s) for s in species], reactions=reactions, **kwargs)
    return out


def source_units(path: str | Path) -> dict | None:
    """The ``units:`` mapping of a mechanism YAML file, or None.

    Written in the units of its source, a reduced mechanism repeats the source's numbers digit for
    digit (converting units rounds the last bit), so a cut that keeps everything reproduces the
    full run exactly.
    """
    import yaml

    try:
        with open(path) as handle:
            data = yaml.safe_load(handle)
        units = data.get("units") if isinstance(data, dict) else None
        return dict(units) if isinstance(units, dict) else None
    except (OSError, yaml.YAMLError):
        return None


def write_yaml_atomic(solution: ct.Solution, path: str | Path, description: str, units: dict | None = None) -> Path:
    """Cantera's own YAML writer, to a temporary name in the same folder, then renamed.

    The writer's ``date:`` header line is left out, so the same cut always gives the same bytes:
    its content hash, and with it the ids of its validation cases, survive a rewrite (reruns
    resume from the case files already computed).
    """
    path = Path(path)
    solution.update_user_header({"description": description})
    solution.TPX = 300.0, ct.one_atm, {solution.species_names[0]: 1.0}
    with store.atomic_path(path, ".tmp-yaml") as tmp:
        try:
            solution.write_yaml(str(tmp), units=units) if units else solution.write_yaml(str(tmp))
        except ct.CanteraError:  # a unit system the writer does not take: its own default
            solution.write_yaml(str(tmp))
        text = tmp.read_text()
        tmp.write_text("".join(ln for ln in text.splitlines(keepends=True) if not ln.startswith("date:")))
    return path


@dataclass
class Cut:
    name: str
    criterion: str
    threshold: float
    keep: np.ndarray
    species: list[str]
    path: Path


def write_cuts(config: dict, ranking: xr.Dataset, out_dir: str | Path,
               report: Callable[[str], None] = print) -> list[Cut]:
    """Write ``<out_dir>/<criterion>-<threshold>.yaml`` for every cut of the config."""
    path = mechanism.resolve(config["mechanism"])
    gas = mechanism.load(path, phase=config.get("phase"))
    if (list(gas.reaction_equations()) != [str(e) for e in ranking["equation"].values]
            or not np.array_equal(mechanism.source_indices(gas), ranking["reaction"].values)):
        raise InputError("mechanism", f"'{path.name}' is not the mechanism the ranking was made with")
    red = reduction_settings(config)
    always = always_kept(gas, config)
    out = []
    for name, criterion, threshold in cuts(config):
        keep = kept_reactions(ranking, criterion, threshold, red["negative_entropy"], gas, always, red["sieve_share"])
        species = species_to_keep(gas, keep, config)
        solution = reduced_solution(path, keep, species, name=f"{path.stem}-{name}")
        rule = (f"reactions whose {criterion} entropy-production share is at least {threshold:g}"
                if criterion in CRITERIA else
                f"reactions among the species whose {criterion} importance exceeds {threshold:g}"
                + (f" and whose local entropy-production share reaches {red['sieve_share']:g}"
                   if criterion == criteria.COMBINED else ""))
        description = (f"Reduced by sigmagrid from {path.name} (sha256 {mechanism.file_sha256(path)}): "
                       f"{rule} over the grid of study '{config.get('study', '')}', {int(keep.sum())} of "
                       f"{keep.size} reactions, {len(species)} of {gas.n_species} species. Model output: "
                       "check it on your own cases before use.")
        target = write_yaml_atomic(solution, Path(out_dir) / f"{name}.yaml", description, source_units(path))
        report(f"{target}: {len(species)} species, {int(keep.sum())} reactions")
        out.append(Cut(name, criterion, threshold, keep, species, target))
    return out


# ------------------------------------------------------------------------------------ validation

#: What a cut costs, per case: name -> (units, long name).
ERRORS = {
    "ignition_delay_error": ("1", "relative error of the ignition delay |tau_cut - tau| / tau (NaN where neither "
                                  "ignites, inf where only one does)"),
    "equilibrium_temperature_error": ("K", "absolute error of the equilibrium temperature"),
    "entropy_produced_error": ("1", "relative error of the total entropy produced"),
}


def _relative(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """|a - b| / |b|; NaN where both are missing (nothing to compare, e.g. no ignition in an
    isothermal reactor), inf where only one is (the cut ignites where the full mechanism does not,
    or the other way round)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        err = np.abs(a - b) / np.abs(b)
    both = ~np.isfinite(a) & ~np.isfinite(b)
    one = np.isfinite(a) != np.isfinite(b)
    return np.where(both, np.nan, np.where(one, np.inf, err))


def _physical_key(reactor, name, temperature, pressure) -> tuple:
    return (str(reactor), str(name), f"{float(temperature):.10g}", f"{float(pressure):.10g}")


def _at_time(path: Path, t: float) -> tuple[float, float]:
    """Temperature (K) and potential rise Phi(t) - Phi(0) (J K-1) of a stored path at time ``t`` (s),
    linear between samples; past the last sample the path has stopped (at equilibrium)."""
    with store.open_case(path) as ds:
        time = ds["time"].values.astype(float)
        temperature = float(np.interp(t, time, ds["temperature"].values.astype(float)))
        potential = ds["potential"].values.astype(float)
        return temperature, float(np.interp(t, time, potential) - potential[0])


def judge_at_end(cut_case: Path, full_case: Path) -> tuple[float, float, float, float]:
    """A case that does not reach equilibrium on the cut, judged on what it reaches: its end time
    t_end (s), the temperature error |T_cut(t_end) - T_full(t_end)| (K), the relative error of the
    potential rise (entropy produced) at t_end (1), and the full path's rise at t_end (J K-1)."""
    with store.open_case(cut_case) as ds:
        t_end = float(ds["time"].values[-1])
    t_cut, rise_cut = _at_time(cut_case, t_end)
    t_full, rise_full = _at_time(full_case, t_end)
    return t_end, abs(t_cut - t_full), float(_relative(np.array([rise_cut]), np.array([rise_full]))[0]), rise_full


def assess_cut(config: dict, mechanism_path: str | Path, summary: xr.Dataset, cases_dir: str | Path,
               name: str = "", report: Callable[[str], None] = print,
               full_cases_dir: str | Path | None = None) -> xr.Dataset:
    """Rerun the grid's cases (or ``reduction.validation_cases``) on a reduced mechanism; per-case errors.

    Cases of the reduced run are matched to the full run by reactor, mixture name, initial
    temperature and pressure (case ids hash the mechanism, so they differ). Case files go to
    ``cases_dir`` and are reused on a rerun. A cut that does not load, or a case that fails on it,
    is recorded as a failure of the cut.

    A case the full mechanism relaxes that only stops short of strict equilibrium on the cut
    (status ``not-relaxed``, within ``stop.max_time``) is no failure: it is judged at its end time
    against the full path at the same time (:func:`judge_at_end`, the full run's case files in
    ``full_cases_dir``) and flagged in ``cut_judged_at_end``.
    """
    from . import config as config_mod, query, runner

    red = reduction_settings(config)
    full = summary
    selection = red.get("validation_cases") or {}
    if selection:
        full = query.select(summary, selection, field="reduction.validation_cases")
    full_ids = [str(c) for c in full["case"].values]
    nc = len(full_ids)
    values = {k: np.full(nc, np.nan) for k in ("ignition_delay", "equilibrium_temperature", "entropy_produced_total")}
    status = np.array(["failed"] * nc, dtype=object)
    reduced_ids = np.array([""] * nc, dtype=object)
    reasons = np.array([""] * nc, dtype=object)
    n_species = n_reactions = -1
    kept_index, kept_equations = np.zeros(0, dtype=np.int64), np.zeros(0, dtype=str)
    load_error = ""
    cut_config = copy.deepcopy(config)
    cut_config["mechanism"] = str(Path(mechanism_path).resolve())
    if "sea" in cut_config:  # the comparison with steepest ascent is no part of what a cut costs
        cut_config["sea"] = dict(cut_config["sea"], enabled=False)
    try:
        cut_config = config_mod.validate(cut_config)
        cut_grid = grid_mod.expand(cut_config)
        gas = mechanism.load(mechanism.resolve(cut_config["mechanism"]))
        n_species, n_reactions = gas.n_species, gas.n_reactions
        kept_index = mechanism.source_indices(gas)
        kept_equations = np.array(gas.reaction_equations(), dtype=str)
    except InputError as err:
        load_error = f"reduced mechanism unusable: {err.message}"
        cut_grid = None
    if cut_grid is not None:
        lookup = {_physical_key(c.reactor, c.composition_name, c.temperature, c.pressure): c for c in cut_grid.cases}
        wanted = []
        for i in range(nc):
            key = _physical_key(full["reactor"].values[i], full["composition_name"].values[i],
                                full["initial_temperature"].values[i], full["initial_pressure"].values[i])
            case = lookup.get(key)
            if case is None:
                reasons[i] = "no matching case in the reduced grid"
                continue
            wanted.append((i, case))
        prefix = f"[{name}] " if name else ""
        files = runner.run_cases(cut_config, [c for _, c in wanted], cases_dir, skip_existing=True,
                                 report=lambda line: report(prefix + line))
        for (i, case), path in zip(wanted, files):
            ds = store.open_case(path)
            reduced_ids[i] = case.case_id
            status[i] = ds.attrs["status"]
            reasons[i] = ds.attrs.get("reason", "")
            for k in values:
                values[k][i] = float(ds[k])
    else:
        reasons[:] = load_error
    ref = {k: full[k].values.astype(float) for k in values}
    errors = {
        "ignition_delay_error": _relative(values["ignition_delay"], ref["ignition_delay"]),
        "equilibrium_temperature_error": np.abs(values["equilibrium_temperature"] - ref["equilibrium_temperature"]),
        "entropy_produced_error": _relative(values["entropy_produced_total"], ref["entropy_produced_total"]),
    }
    full_status = full["status"].values.astype(str)
    end_time = np.full(nc, np.nan)
    at_end = (full_status == "relaxed") & (status == "not-relaxed")
    for i in np.flatnonzero(at_end):
        full_case = Path(full_cases_dir or "") / f"{full_ids[i]}.nc"
        cut_case = Path(cases_dir) / f"{reduced_ids[i]}.nc"
        if full_cases_dir is None or not full_case.is_file():
            at_end[i] = False
            reasons[i] = f"{reasons[i]}; the full path to judge it at its end time is not available"
            continue
        end_time[i], errors["equilibrium_temperature_error"][i], errors["entropy_produced_error"][i], _ = \
            judge_at_end(cut_case, full_case)
    # a case fails the cut when the cut loses what the full mechanism achieved (stopping short of
    # strict equilibrium within max_time is judged on what it reaches instead)
    failed = (status == "failed") | ((full_status == "relaxed") & (status != "relaxed") & ~at_end)
    failed &= full_status != "failed"
    for k in errors:
        errors[k] = np.where(failed, np.nan, errors[k])
    data = {k: ("case", errors[k], {"units": u, "long_name": ln}) for k, (u, ln) in ERRORS.items()}
    data.update({
        "cut_ignition_delay": ("case", values["ignition_delay"], {"units": "s", "long_name": "ignition delay on the cut"}),
        "cut_equilibrium_temperature": ("case", values["equilibrium_temperature"],
                                        {"units": "K", "long_name": "equilibrium temperature on the cut"}),
        "cut_entropy_produced_total": ("case", values["entropy_produced_total"],
                                       {"units": "J K-1", "long_name": "entropy produced on the cut"}),
        "cut_status": ("case", status.astype(str), {"long_name": "status of the case on the cut"}),
        "cut_failed": ("case", failed.astype(np.int8), {"units": "1", "long_name": "case fails on the cut",
                                                        "flag_values": np.array([0, 1], dtype=np.int8),
                                                        "flag_meanings": "no yes"}),
        "cut_reason": ("case", reasons.astype(str), {"long_name": "why the case did not relax on the cut"}),
        "cut_case_id": ("case", reduced_ids.astype(str), {"long_name": "id of the case in the reduced run"}),
        "cut_judged_at_end": ("case", at_end.astype(np.int8), {}),
        "cut_end_time": ("case", end_time, {}),
    })
    coords = {c: full.coords[c] for c in full.coords if full.coords[c].dims == ("case",)}
    # the reactions the cut keeps, by their index in the full mechanism
    coords.update({"reaction": ("reaction", kept_index), "equation": ("reaction", kept_equations)})
    validation = xr.Dataset(data, coords=coords, attrs={
        "title": f"sigmagrid validation of cut {name}", "source": "sigmagrid",
        "cut": name, "cut_mechanism": str(mechanism_path), "n_species": n_species, "n_reactions": n_reactions,
        "load_error": load_error})
    return fileformat.finish(validation, "validation", f"{nc} cases rerun on {Path(mechanism_path).name}")


def summarize_cuts(config: dict, ranking: xr.Dataset, cut_dir: str | Path,
                   validations: dict[str, xr.Dataset] | None) -> tuple[xr.Dataset, pd.DataFrame]:
    """reduction.nc and reduction.csv: per cut its size, largest and typical (median) errors.

    The smallest cut within tolerances (fewest species, then fewest reactions, among cuts with no
    failed case and every largest error at or below its tolerance) is named in the table's
    ``smallest_within_tolerances`` column and the Dataset's attribute of that name.
    """
    red = reduction_settings(config)
    tol = {"ignition_delay_error": red["max_ignition_delay_error"],
           "equilibrium_temperature_error": red["max_equilibrium_temperature_error"],
           "entropy_produced_error": red["max_entropy_produced_error"]}
    rows, per_case = [], {}
    total_reactions = ranking.sizes["reaction"]
    for name, criterion, threshold in cuts(config):
        path = Path(cut_dir) / f"{name}.yaml"
        row = {"cut": name, "criterion": criterion, "threshold [1]": threshold, "mechanism": str(path)}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                gas = ct.Solution(str(path))
            row["species [1]"], row["reactions [1]"] = gas.n_species, gas.n_reactions
        except Exception as err:  # noqa: BLE001 - reported as this cut's failure
            row["species [1]"], row["reactions [1]"] = -1, -1
            row["note"] = f"does not load: {str(err).strip().splitlines()[-1][:200]}"
        row["reactions_removed [1]"] = total_reactions - row["reactions [1]"] if row["reactions [1]"] >= 0 else -1
        v = (validations or {}).get(name)
        if v is None:
            row["validated"] = False
            for k in ERRORS:
                row[f"{k}_max [{ERRORS[k][0]}]"] = np.nan
                row[f"{k}_median [{ERRORS[k][0]}]"] = np.nan
            row["cases [1]"], row["failed_cases [1]"], row["judged_at_end_cases [1]"] = 0, 0, 0
            row["largest_error_ratio [1]"] = np.nan
            row["within_tolerances"] = False
        else:
            row["validated"] = True
            failed = v["cut_failed"].values.astype(bool)
            row["cases [1]"], row["failed_cases [1]"] = int(v.sizes["case"]), int(failed.sum())
            at_end = v["cut_judged_at_end"].values.astype(bool) if "cut_judged_at_end" in v else np.zeros(failed.size, bool)
            row["judged_at_end_cases [1]"] = int(at_end.sum())
            ok, ratios = True, []
            for k in ERRORS:
                e = v[k].values.astype(float)
                e = e[~failed & ~np.isnan(e)]
                largest = float(e.max()) if e.size else np.nan
                row[f"{k}_max [{ERRORS[k][0]}]"] = largest
                row[f"{k}_median [{ERRORS[k][0]}]"] = float(np.median(e)) if e.size else np.nan
                ok &= bool(e.size == 0 or largest <= tol[k])
                if e.size:
                    ratios.append(largest / tol[k] if tol[k] > 0 else (0.0 if largest == 0 else np.inf))
            # one number on one axis for every criterion: the worst error in units of its tolerance
            row["largest_error_ratio [1]"] = max(ratios) if ratios else np.nan
            row["within_tolerances"] = bool(ok and not failed.any() and row["species [1]"] >= 0
                                            and not v.attrs.get("load_error"))
            if v.attrs.get("load_error"):
                row["note"] = str(v.attrs["load_error"])
            elif failed.any():
                row["note"] = f"{int(failed.sum())} case(s) fail on the cut: " + "; ".join(
                    sorted(set(v["cut_reason"].values[failed].astype(str))))[:300]
            per_case[name] = v
        rows.append(row)
    table = pd.DataFrame(rows)
    fits = table[table["within_tolerances"]]
    smallest = ""
    if len(fits):
        smallest = str(fits.sort_values(["species [1]", "reactions [1]", "threshold [1]"],
                                        ascending=[True, True, False]).iloc[0]["cut"])
    table["smallest_within_tolerances"] = table["cut"] == smallest
    by_criterion = smallest_by_criterion(table)
    table["smallest_of_criterion"] = table["cut"].isin([c for c in by_criterion.values() if c])
    if "note" not in table:
        table["note"] = ""
    table["note"] = table["note"].fillna("")

    def col(name, kind=float):
        return table[name].to_numpy(kind)

    data = {
        "criterion": ("cut", col("criterion", str), {"long_name": "ranking criterion of the cut"}),
        "threshold": ("cut", col("threshold [1]"), {"units": "1", "long_name": "threshold of the cut"}),
        "n_species": ("cut", col("species [1]", int), {"units": "1", "long_name": "species in the cut"}),
        "n_reactions": ("cut", col("reactions [1]", int), {"units": "1", "long_name": "reactions in the cut"}),
        "failed_cases": ("cut", col("failed_cases [1]", int), {"units": "1", "long_name": "cases that fail on the cut"}),
        "judged_at_end_cases": ("cut", col("judged_at_end_cases [1]", int), {}),
        "largest_error_ratio": ("cut", col("largest_error_ratio [1]"), {}),
        "smallest_of_criterion": ("cut", col("smallest_of_criterion", bool).astype(np.int8), {}),
        "within_tolerances": ("cut", col("within_tolerances", bool).astype(np.int8),
                              {"units": "1", "long_name": "validated, no failed case, largest errors within tolerances",
                               "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "no yes"}),
    }
    for k, (u, ln) in ERRORS.items():
        data[f"{k}_max"] = ("cut", col(f"{k}_max [{u}]"), {"units": u, "long_name": f"largest {ln}"})
        data[f"{k}_median"] = ("cut", col(f"{k}_median [{u}]"), {"units": u, "long_name": f"median {ln}"})
    if per_case:
        stacked = xr.concat([per_case[n][list(ERRORS) + ["cut_failed"]].expand_dims(cut=[n]) for n in per_case],
                            dim="cut", join="outer")
        for k in list(ERRORS) + ["cut_failed"]:
            data[f"case_{k}"] = (("cut", "case"), stacked[k].reindex(cut=table["cut"].to_list()).values,
                                 dict(per_case[next(iter(per_case))][k].attrs))
        case_coords = {c: stacked.coords[c] for c in stacked.coords if stacked.coords[c].dims == ("case",)}
    else:
        case_coords = {}
    ds = xr.Dataset(data, coords={"cut": ("cut", col("cut", str), {"long_name": "cut name"}), **case_coords}, attrs={
        "title": "sigmagrid reduced mechanisms and what they cost",
        "source": "sigmagrid", "smallest_within_tolerances": smallest,
        "smallest_by_criterion": "; ".join(f"{c}: {n or 'none'}" for c, n in by_criterion.items()),
        **{f"tolerance_{k}": float(v) for k, v in tol.items()},
        "comment": "errors are against the full mechanism on the same cases; median is the typical error"})
    return fileformat.finish(ds, "reduction", f"{len(rows)} cuts summarized"), table


def smallest_by_criterion(table: pd.DataFrame) -> dict[str, str]:
    """Per criterion (in table order) the name of its smallest cut within tolerances ('' if none):
    fewest species, then fewest reactions, then the highest threshold."""
    out = {}
    for criterion in dict.fromkeys(table["criterion"]):
        fits = table[(table["criterion"] == criterion) & table["within_tolerances"].astype(bool)]
        out[criterion] = "" if fits.empty else str(
            fits.sort_values(["species [1]", "reactions [1]", "threshold [1]"], ascending=[True, True, False])
            .iloc[0]["cut"])
    return out


def write_reduction(config: dict, ranking_path, cut_dir, table_path, netcdf_path,
                    validation_paths: dict[str, str | Path] | None) -> tuple[xr.Dataset, pd.DataFrame]:
    """Read the validations, summarize the cuts, write reduction.csv and reduction.nc atomically."""
    ranking = store.open_checked(ranking_path, "ranking")
    validations = None
    if validation_paths is not None:
        validations = {name: store.open_checked(p, "validation") for name, p in validation_paths.items()}
    ds, table = summarize_cuts(config, ranking, cut_dir, validations)
    store.write_atomic(ds, netcdf_path)
    store.write_text_atomic(table.to_csv(index=False, float_format="%.6g"), table_path)
    return ds, table


def tolerances(config: dict) -> dict:
    """The cut validation's tolerances, keyed with their units as in reduction.csv's columns."""
    red = reduction_settings(config)
    return {"ignition_delay_error [1]": red["max_ignition_delay_error"],
            "equilibrium_temperature_error [K]": red["max_equilibrium_temperature_error"],
            "entropy_produced_error [1]": red["max_entropy_produced_error"]}


def tolerance_text(config: dict) -> str:
    tol = tolerances(config)
    return (f"ignition delay {tol['ignition_delay_error [1]']:g} (relative), equilibrium temperature "
            f"{tol['equilibrium_temperature_error [K]']:g} K, entropy produced {tol['entropy_produced_error [1]']:g} "
            "(relative)")



def reduce_in_process(config: dict, results: str | Path = "results",
                      report: Callable[[str], None] = print) -> dict:
    """Everything after the summary, without Snakemake: progress.nc, the ranking, the cuts, their
    validation (when ``reduction.validate``) and reduction.csv / reduction.nc, under ``results``.

    Uses the case files of the config's grid in ``results/cases`` (``sigmagrid run`` writes them).
    Returns the paths written, the reduction table and the name of the smallest cut within tolerances.
    """
    from . import progress

    results = Path(results)
    grid = grid_mod.expand(config)
    files = [results / "cases" / f"{c.case_id}.nc" for c in grid.cases]
    missing = [f for f in files if not f.is_file()]
    summary_path = results / "summary.nc"
    if missing or not summary_path.is_file():
        raise InputError("--results", f"'{results}' lacks {len(missing)} case file(s) or the summary of this "
                         "config: run `sigmagrid run CONFIG --results DIR` first")
    progress.write(files, results / "progress.nc", int(config["progress_grid"]["points"]), report=report)
    ranking = write_ranking(summary_path, files, results / "ranking.csv", results / "ranking.nc",
                            float(reduction_settings(config)["negligible"]), report=report, config=config)
    cut_dir = results / "reduced"
    written = write_cuts(config, ranking, cut_dir, report=report)
    validations = None
    if reduction_settings(config)["validate"]:
        summary = store.open_checked(summary_path, "summary")
        validations = {}
        for cut in written:
            target = cut_dir / cut.name / "validation.nc"
            result = assess_cut(config, cut.path, summary, cut_dir / cut.name / "cases", cut.name, report,
                                full_cases_dir=results / "cases")
            store.write_atomic(result, target)
            validations[cut.name] = target
    ds, table = write_reduction(config, results / "ranking.nc", cut_dir, results / "reduction.csv",
                                results / "reduction.nc", validations)
    return {"table": table, "smallest": ds.attrs["smallest_within_tolerances"], "cuts": written}
