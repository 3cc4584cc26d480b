"""Ranking by entropy production, reduced mechanisms, their validation, and the progress grid.

References named beside the checks:
- the entropy-production-analysis (EPA) criterion: Kooshkbaghi, Frouzakis, Boulouchos and Karlin,
  Combust. Flame 161 (2014) 1507-1515 -- keep reaction j when sigma_j / sigma reaches the threshold
  somewhere along a path; recomputed here from Cantera directly (reference library);
- de Donder's inequality (every reversible reaction has sigma_j >= 0; de Groot and Mazur 1962);
- Cantera itself as the judge of a reduced file: it must load alone and relax.
"""

from __future__ import annotations

import functools
import subprocess
import sys

import cantera as ct
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from sigmagrid import config as config_mod, grid as grid_mod, mechanism, progress, rank, runner, store
from sigmagrid.errors import InputError

AIR = "O2:1, N2:3.76"
THRESHOLDS = [0.0, 0.001, 0.01, 0.05, 0.99]


def _config(**overrides) -> dict:
    raw = {"study": "rank test", "mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
           "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [0.6, 1.8]},
           "temperature": [1100.0], "pressure": [101325.0, 1013250.0], "stop": {"max_time": 0.5},
           "reduction": {"criteria": ["local", "integrated-max"], "thresholds": THRESHOLDS}}
    raw.update(overrides)
    return config_mod.validate(raw)


@pytest.fixture(scope="module")
def reduced(tmp_path_factory):
    """A small h2o2 grid, run, ranked, cut at five thresholds under two criteria, validated."""
    results = tmp_path_factory.mktemp("rank")
    config = _config()
    runner.run_grid(config, results, report=lambda s: None)
    out = rank.reduce_in_process(config, results, report=lambda s: None)
    return config, results, out


def _ranking(results) -> xr.Dataset:
    with xr.open_dataset(results / "ranking.nc") as r:
        return r.load()


def test_integrated_shares_sum_to_one_per_case(reduced):
    _, results, _ = reduced
    r = _ranking(results)
    usable = r["usable"].values.astype(bool)
    assert usable.all()
    assert np.all(np.abs(r["integrated_share"].sum("reaction").values - 1.0) <= 1e-9)
    assert np.all(np.abs(r["share_sum"].values - 1.0) <= 1e-9)


@functools.lru_cache(maxsize=None)
def _reference_for(case, max_time: float) -> np.ndarray:
    return _reference_local_shares({"stop": {"max_time": max_time}}, case)


def _reference_local_shares(config: dict, case, negligible: float = 1e-3) -> np.ndarray:
    """EPA ratio sigma_j / sigma at every CVODE step, straight from Cantera (no sigmagrid code)."""
    gas = ct.Solution("h2o2.yaml")
    gas.TPX = case.temperature, case.pressure, case.mole_fractions()
    cls = ct.IdealGasReactor if case.reactor == "isolated" else ct.IdealGasConstPressureReactor
    reactor = cls(gas, clone=False)
    net = ct.ReactorNet([reactor])
    net.rtol, net.atol = 1e-10, 1e-20
    rows, peak = [], 0.0
    while net.time < config["stop"]["max_time"]:
        net.step()
        # sigma_j = A_j q_j / T with A_j = -Delta_r G_j (de Groot and Mazur 1962)
        rows.append(-gas.delta_gibbs * gas.net_rates_of_progress / gas.T)
        peak = max(peak, rows[-1].sum())
        if len(rows) > 50 and abs(rows[-1].sum()) < 1e-9 * peak:  # far below the 1e-3 cut-off
            break
    sigma = np.array(rows)
    total = sigma.sum(axis=1)
    keep = total >= negligible * total.max()
    return (sigma[keep] / total[keep, None]).max(axis=0)


def test_local_share_is_the_published_epa_ratio(reduced):
    # Kooshkbaghi et al. (2014): the ratio sigma_j/sigma along the path, here on every solver step
    config, results, _ = reduced
    r = _ranking(results)
    cases = grid_mod.expand(config).cases
    for case in cases[:4]:
        ref = _reference_local_shares(config, case)
        ours = r["local_share_peak"].sel(case=case.case_id).values
        big = ref > 1e-3
        # stored samples (500 per case) against every step: peaks agree to a few per cent
        assert np.allclose(ours[big], ref[big], rtol=0.05), (case.label, np.c_[ours[big], ref[big]])
        # a subset of the states cannot exceed the maximum (up to float32 storage and the slightly
        # wider non-negligible window that a lower sampled peak gives)
        assert np.all(ours <= ref * (1 + 1e-3) + 1e-12)


def test_epa_kept_set_reasoned_out(reduced):
    # The mixtures hold no argon, so 'H + O2 + AR <=> HO2 + AR' has a zero rate, zero entropy
    # production and a zero share: the EPA criterion drops it at any positive threshold.
    # 'H + O2 + N2 <=> HO2 + N2' (N2 is 70 % of the mixture) is a main chain-terminating step.
    config, results, _ = reduced
    r = _ranking(results)
    eqs = list(r["equation"].values)
    argon = eqs.index("H + O2 + AR <=> HO2 + AR")
    nitrogen = eqs.index("H + O2 + N2 <=> HO2 + N2")
    assert r["local_share_max"].values[argon] == 0.0
    keep_small = rank.kept_reactions(r, "local", 1e-6)
    assert not keep_small[argon] and keep_small[nitrogen]
    assert rank.kept_reactions(r, "local", 0.0).all()
    # against the reference recomputation over the whole grid, away from the threshold itself
    cases = grid_mod.expand(config).cases
    ref = np.max([_reference_for(c, config["stop"]["max_time"]) for c in cases], axis=0)
    dup = r["duplicate_group"].values
    ref_group = np.array([ref[dup == g].sum() for g in dup])  # no h2o2 duplicate member is negative
    for eps in (0.01, 0.05):
        clear = np.abs(ref_group / eps - 1) > 0.1
        expected = ref_group >= eps
        got = rank.kept_reactions(r, "local", eps)
        assert np.array_equal(got[clear], expected[clear]), (eps, np.array(eqs)[clear & (got != expected)])


def test_cuts_are_nested_and_threshold_zero_is_the_whole_mechanism(reduced):
    _, results, out = reduced
    full = ct.Solution("h2o2.yaml")
    by_criterion = {}
    for cut in out["cuts"]:
        gas = ct.Solution(str(cut.path))
        by_criterion.setdefault(cut.criterion, []).append(
            (cut.threshold, set(gas.species_names), set(gas.reaction_equations())))
    for criterion, items in by_criterion.items():
        items.sort()
        t0, species0, reactions0 = items[0]
        assert t0 == 0.0
        assert species0 == set(full.species_names) and reactions0 == set(full.reaction_equations())
        for (_, s_lo, r_lo), (_, s_hi, r_hi) in zip(items, items[1:]):
            assert r_hi <= r_lo and s_hi <= s_lo, criterion
        assert len(items[-1][2]) < len(reactions0)  # the top threshold really cuts


def test_threshold_zero_reproduces_the_full_run(reduced):
    _, results, out = reduced
    table = out["table"].set_index("cut")
    for name in ("local-0", "integrated-max-0"):
        row = table.loc[name]
        assert row["failed_cases [1]"] == 0 and row["cases [1]"] == 8
        # written in the source's units, the file repeats its numbers: the rerun is the same run
        assert row["ignition_delay_error_max [1]"] <= 1e-9
        assert row["equilibrium_temperature_error_max [K]"] <= 1e-6
        assert row["entropy_produced_error_max [1]"] <= 1e-9
        assert row["within_tolerances"]


def test_reduced_files_load_in_cantera_alone(reduced):
    _, results, out = reduced
    script = ("import sys, cantera as ct\n"
              "for path in sys.argv[1:]:\n"
              "    g = ct.Solution(path)\n"
              "    g.TPX = 1500.0, ct.one_atm, 'H2:2, O2:1, N2:3.76'\n"
              "    g.equilibrate('HP')\n"
              "    print(path, g.n_species, g.n_reactions, round(g.T, 3))\n")
    paths = [str(c.path) for c in out["cuts"]]
    done = subprocess.run([sys.executable, "-c", script, *paths], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert len(done.stdout.splitlines()) == len(paths)
    for cut in out["cuts"]:
        text = cut.path.read_text()
        assert "Reduced by sigmagrid" in text
        gas = ct.Solution(str(cut.path))
        for reaction in gas.reactions():  # no efficiency names a species the file lacks
            tb = getattr(reaction, "third_body", None)
            if tb is not None:
                assert set(tb.efficiencies) <= set(gas.species_names)
        assert {"H2", "O2", "N2"} <= set(gas.species_names)  # fuel, oxidizer, inert always kept


def test_a_cut_that_breaks_cases_is_the_cut_failing(reduced):
    # threshold 0.99 keeps (almost) nothing: the cases fail or stop on it; the program reports it
    _, results, out = reduced
    table = out["table"].set_index("cut")
    row = table.loc["local-0.99"]
    assert row["validated"] and not row["within_tolerances"]
    assert row["failed_cases [1]"] > 0 or row["ignition_delay_error_max [1]"] > 0.05
    assert out["smallest"] in table.index and table.loc[out["smallest"], "within_tolerances"]
    smallest = table.loc[out["smallest"]]
    fits = table[table["within_tolerances"]]
    assert smallest["species [1]"] == fits["species [1]"].min()
    csv = pd.read_csv(results / "reduction.csv")
    assert csv["smallest_within_tolerances"].sum() == 1
    with xr.open_dataset(results / "reduction.nc") as ds:
        assert ds.attrs["smallest_within_tolerances"] == out["smallest"]
        assert ds["ignition_delay_error_max"].attrs["units"] == "1"
        assert ds["equilibrium_temperature_error_max"].attrs["units"] == "K"


def test_reruns_resume_from_the_cut_case_files(reduced):
    config, results, _ = reduced
    before = {p: p.stat().st_mtime_ns for p in (results / "reduced").glob("*/cases/*.nc")}
    assert before
    rank.reduce_in_process(config, results, report=lambda s: None)
    after = {p: p.stat().st_mtime_ns for p in (results / "reduced").glob("*/cases/*.nc")}
    assert after == before


# ------------------------------------------------------------------ reactions that consume entropy


@pytest.fixture(scope="module")
def irreversible(tmp_path_factory):
    """h2o2 plus an irreversible 'H + H2O => H2 + OH' (uphill along the path: it consumes entropy)."""
    folder = tmp_path_factory.mktemp("irr")
    base = ct.Solution("h2o2.yaml")
    extra = ct.Reaction(equation="H + H2O => H2 + OH", rate=ct.ArrheniusRate(1.0e6, 0.0, 0.0))
    gas = ct.Solution(thermo="ideal-gas", kinetics="gas", species=base.species(),
                      reactions=base.reactions() + [extra])
    mech = folder / "h2o2-irreversible.yaml"
    gas.write_yaml(str(mech))
    config = _config(mechanism=str(mech), reactors=["isolated"], pressure=[101325.0], stop={"max_time": 0.05},
                     reduction={"criteria": ["local"], "thresholds": [0.0, 0.01]})
    runner.run_grid(config, folder, report=lambda s: None)
    return config, folder


def test_entropy_consuming_reaction_is_flagged_not_ranked(irreversible):
    config, folder = irreversible
    files = sorted((folder / "cases").glob("*.nc"))
    ranking = rank.write_ranking(folder / "summary.nc", files, folder / "ranking.csv", folder / "ranking.nc")
    eqs = list(ranking["equation"].values)
    j = eqs.index("H + H2O => H2 + OH")
    assert ranking["negative_entropy"].values[j] == 1 and ranking["flag_reason"].values[j] == "irreversible"
    assert ranking["most_negative_share"].values[j] < 0
    assert np.isnan(ranking["rank"].values[:, j]).all()
    # de Donder: no reversible reaction of h2o2 consumes entropy
    assert ranking["negative_entropy"].values[:j].sum() == 0
    # shares still sum to 1 with the negative one included
    assert np.all(np.abs(ranking["integrated_share"].sum("reaction").values - 1.0) <= 1e-9)
    table = pd.read_csv(folder / "ranking.csv")
    row = table[table["equation"] == "H + H2O => H2 + OH"].iloc[0]
    assert bool(row["negative_entropy"]) and pd.isna(row["rank_local [1]"]) and row["reaction"] == j
    assert table.iloc[-1]["equation"] == "H + H2O => H2 + OH"  # listed, after every ranked reaction
    # kept by default (a criterion on entropy production cannot judge it), dropped on request
    assert rank.kept_reactions(ranking, "local", 0.5)[j]
    assert not rank.kept_reactions(ranking, "local", 0.0, negative="drop")[j]


# --------------------------------------------------------------------------------- progress grid


def test_progress_grid_matches_the_full_resolution_times(reduced):
    # time_to_progress in each case file comes from the full solver path, not from the samples
    _, results, _ = reduced
    with xr.open_dataset(results / "progress.nc") as p:
        p = p.load()
    assert {0.0, 0.5, 0.9, 0.99, 1.0} <= set(np.round(p["progress"].values, 12))
    steps = np.diff(p["progress"].values)
    assert steps[0] < 1e-3 and steps[-1] < 1e-3 and steps.max() > 1e-2  # dense near 0 and 1
    for cid in p["case"].values:
        ds = store.open_case(results / "cases" / f"{cid}.nc")
        for level in (0.5, 0.9, 0.99):
            t_full = float(ds["time_to_progress"].sel(progress_level=level))
            t_grid = float(p["time"].sel(case=cid, progress=level))
            assert t_grid == pytest.approx(t_full, rel=2e-3)
    total = p["local_share"].sum("reaction")
    assert np.nanmax(np.abs(total.values - 1)) < 1e-5  # float32 storage
    rich = p.where((p.equivalence_ratio > 1) & (p.initial_pressure == 1013250.0), drop=True)
    assert rich.sizes["case"] == 2
    assert rich["local_share"].sel(progress=0.5).mean("case").to_series().idxmax() in p["reaction"].values


def test_interpolation_weights_levels_beyond_the_path_are_missing():
    lam = np.array([0.0, 0.2, 0.2, 0.7])  # a plateau, and a path that stops at 0.7
    lower, upper, w = progress.interpolation_weights(lam, np.array([0.0, 0.1, 0.45, 0.7, 0.9]))
    values = np.array([0.0, 2.0, 2.0, 7.0])
    got = (1 - w) * values[lower] + w * values[upper]
    assert np.allclose(got[:4], [0.0, 1.0, 4.5, 7.0]) and np.isnan(got[4])


def test_bad_reduction_config_names_the_field():
    with pytest.raises(InputError) as err:
        _config(reduction={"criteria": ["biggest"]})
    assert err.value.field == "reduction.criteria[0]" and "local" in err.value.message
    with pytest.raises(InputError) as err:
        _config(reduction={"validation_cases": {"colour": "red"}})
    assert "reactor" in err.value.message


def test_gri30_hydrogen_case_drops_the_carbon_chemistry(tmp_path):
    # Reasoned out: a hydrogen-air mixture holds no carbon, so every reaction of GRI-Mech 3.0 with
    # a carbon species has zero forward and reverse rates (mass action), zero entropy production
    # and a zero EPA share; any positive threshold drops them, and with them every carbon species.
    # Dropping reactions that never run must cost nothing (to round-off) on the same case.
    config = config_mod.validate({
        "mechanism": "gri30.yaml", "reactors": ["isolated"],
        "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [1.0]},
        "temperature": [1200.0], "pressure": [101325.0], "stop": {"max_time": 0.2},
        "reduction": {"criteria": ["local"], "thresholds": [0.0, 1e-12]}})
    runner.run_grid(config, tmp_path, report=lambda s: None)
    out = rank.reduce_in_process(config, tmp_path, report=lambda s: None)
    full = ct.Solution("gri30.yaml")
    carbon = {s.name for s in full.species() if "C" in s.composition}
    cut = {c.threshold: c for c in out["cuts"]}[1e-12]
    reduced = ct.Solution(str(cut.path))
    assert not carbon & set(reduced.species_names)
    assert {"H2", "O2", "N2", "AR", "H2O", "OH"} <= set(reduced.species_names)
    for reaction in full.reactions():
        names = set(reaction.reactants) | set(reaction.products)
        if names & carbon:
            assert reaction.equation not in reduced.reaction_equations()
    assert cut.keep.sum() < full.n_reactions
    row = out["table"].set_index("cut").loc["local-1e-12"]
    assert row["failed_cases [1]"] == 0
    # the ignition delay is the midpoint of the solver step with the largest dT/dt: another step
    # sequence moves it by about a step width (7.5e-5 relative here)
    assert row["ignition_delay_error_max [1]"] < 1e-3
    assert row["equilibrium_temperature_error_max [K]"] < 1e-6
    # the entropy produced is a trapezoid integral over the solver's steps, accurate to about its
    # balance residual (~5e-6 here); another step sequence moves it within that
    assert row["entropy_produced_error_max [1]"] < 2e-5


def test_validation_subset_and_a_cut_without_reactions(reduced, tmp_path):
    # a subset chosen by case coordinates; the 0.99 cut of the fixture keeps no reaction at all
    config, results, _ = reduced
    with xr.open_dataset(results / "summary.nc") as s:
        summary = s.load()
    sub = dict(config, reduction=dict(config["reduction"], validation_cases={
        "reactor": "isolated", "equivalence_ratio": {"min": 1.0}}))
    v = rank.assess_cut(sub, results / "reduced" / "local-0.yaml", summary, tmp_path / "cases", "local-0",
                        report=lambda s: None)
    assert v.sizes["case"] == 2 and set(v["reactor"].values) == {"isolated"}
    assert (v["equivalence_ratio"].values > 1).all() and v["cut_failed"].sum() == 0
    empty = ct.Solution(str(results / "reduced" / "local-0.99.yaml"))
    assert empty.n_reactions == 0  # no reaction makes 99 % of the entropy production anywhere
    v = rank.assess_cut(sub, results / "reduced" / "local-0.99.yaml", summary, tmp_path / "none",
                        "local-0.99", report=lambda s: None)
    assert v["cut_failed"].values.all() and "no reactions" in v.attrs["load_error"]
    row = pd.read_csv(results / "reduction.csv").set_index("cut").loc["local-0.99"]
    assert not row["within_tolerances"] and isinstance(row["note"], str) and row["note"]


def test_cli_refuses_a_ranking_of_another_mechanism(reduced, tmp_path):
    from conftest import run_cli

    _, results, _ = reduced
    config = tmp_path / "gri.yaml"
    config.write_text("mechanism: gri30.yaml\nreactors: [isolated]\nfeed: {fuel: 'H2:1', oxidizer: 'O2:1, N2:3.76', "
                      "equivalence_ratio: [1.0]}\ntemperature: [1100.0]\npressure: [101325.0]\n")
    done = run_cli("cut", str(config), "--ranking", str(results / "ranking.nc"), "--out-dir", str(tmp_path / "cuts"))
    assert done.returncode == 2 and "not the mechanism the ranking was made with" in done.stderr
    assert not (tmp_path / "cuts").exists() or not list((tmp_path / "cuts").glob("*.yaml"))
    done = run_cli("rank", str(tmp_path / "none.nc"), "--summary", str(results / "summary.nc"),
                   "--table", str(tmp_path / "r.csv"), "--out", str(tmp_path / "r.nc"))
    assert done.returncode == 2 and not (tmp_path / "r.csv").exists() and "Traceback" not in done.stderr


def test_a_lone_duplicate_loses_its_flag(tmp_path):
    # Cantera's 'duplicate' flag says another reaction has the same reactants and products; once
    # the partner is cut the flag is false (readers such as Chemkin-format tools refuse it)
    full = ct.Solution("h2o2.yaml")
    dup = [j for j, r in enumerate(full.reactions()) if r.duplicate]
    keep = np.ones(full.n_reactions, bool)
    keep[dup[0]] = False  # cut one member of a pair
    sol = rank.reduced_solution(mechanism.resolve("h2o2.yaml"), keep, list(full.species_names))
    partner = full.reaction(dup[0]).equation
    lone = [r for r in sol.reactions() if r.equation == partner]
    assert len(lone) == 1 and not lone[0].duplicate
    assert sum(r.duplicate for r in sol.reactions()) == len(dup) - 2


def test_query_by_local_share_agrees_with_the_ranking(reduced):
    from sigmagrid import query

    _, results, _ = reduced
    r = _ranking(results)
    everything = query.top_reactions_local(r, None, n=r.sizes["reaction"]).set_index("reaction")
    assert np.allclose(everything["local_share_max [1]"].sort_index(), r["local_share_max"].values, equal_nan=True)
    iso = query.top_reactions_local(r, {"reactor": "isolated"}, n=r.sizes["reaction"]).set_index("reaction")
    assert (iso["local_share_max [1]"].sort_index().fillna(0) <= r["local_share_max"].fillna(0).values + 1e-15).all()
    assert set(iso["case_of_max"]) - {""} <= {str(x) for x in r["label"].values if str(x).startswith("isolated")}
