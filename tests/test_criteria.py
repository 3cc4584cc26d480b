"""Reduction criteria side by side: graph-based species cuts (DRG, DRGEP), the combined
drgep-sieve, per-criterion thresholds, and the judgement of cases that stop short of equilibrium.

References named beside the checks:
- DRG: Lu and Law, Proc. Combust. Inst. 30 (2005) 1333; DRGEP: Pepiot-Desjardins and Pitsch,
  Combust. Flame 154 (2008) 67 (a species cut removes every reaction of a removed species);
- Cantera as the judge of a reduced file: it must load on its own;
- GRI-Mech 3.0 without its nitrogen chemistry keeps 36 species, N2 included (common practice,
  from memory), and methane ignition does not need that chemistry (common practice).
"""

from __future__ import annotations

import cantera as ct
import numpy as np
import pytest
import xarray as xr

from sigmagrid import config as config_mod, criteria, mechanism, rank, runner
from sigmagrid.errors import InputError

AIR = "O2:1, N2:3.76"


def _h2_config(**reduction) -> dict:
    return config_mod.validate({
        "study": "criteria test", "mechanism": "h2o2.yaml", "reactors": ["isolated"],
        "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [0.6, 1.8]},
        "temperature": [1100.0], "pressure": [101325.0], "stop": {"max_time": 0.5}, "sea": {"enabled": False},
        "reduction": {"criteria": ["local", "drg", "drgep", "drgep-sieve"], "thresholds": [0.0, 0.01],
                      "species_thresholds": [0.1, 0.9], **reduction}})


@pytest.fixture(scope="module")
def hydrogen(tmp_path_factory):
    results = tmp_path_factory.mktemp("criteria")
    config = _h2_config()
    runner.run_grid(config, results, report=lambda s: None)
    out = rank.reduce_in_process(config, results, report=lambda s: None)
    return config, results, out


def test_thresholds_per_criterion_and_kind():
    config = _h2_config(thresholds_by_criterion={"drgep": [0.5]})
    assert config_mod.cuts(config) == [("local-0", "local", 0.0), ("local-0.01", "local", 0.01),
                                       ("drg-0.1", "drg", 0.1), ("drg-0.9", "drg", 0.9),
                                       ("drgep-0.5", "drgep", 0.5),
                                       ("drgep-sieve-0.1", "drgep-sieve", 0.1), ("drgep-sieve-0.9", "drgep-sieve", 0.9)]


@pytest.mark.parametrize("reduction, field, allowed", [
    ({"criteria": ["drgx"]}, "reduction.criteria[0]", "drgep-sieve"),
    ({"thresholds_by_criterion": {"biggest": [0.1]}}, "reduction.thresholds_by_criterion", "drgep"),
    ({"species_thresholds": [1.5]}, "reduction.species_thresholds[0]", "< 1"),
    ({"sieve_share": -1}, "reduction.sieve_share", ">= 0"),
])
def test_bad_criteria_settings_name_the_field(reduction, field, allowed):
    with pytest.raises(InputError) as err:
        _h2_config(**reduction)
    assert err.value.field.startswith(field) and allowed in err.value.message


def test_unknown_target_names_the_field(hydrogen, tmp_path):
    config = _h2_config(targets=["XYZ"])
    _, results, _ = hydrogen
    with pytest.raises(InputError) as err:
        rank.write_ranking(results / "summary.nc", sorted((results / "cases").glob("*.nc")),
                           tmp_path / "r.csv", tmp_path / "r.nc", config=config)
    assert err.value.field == "reduction.targets" and "XYZ" in err.value.message


def test_species_cut_removes_every_reaction_of_a_removed_species(hydrogen):
    config, results, out = hydrogen
    full = ct.Solution("h2o2.yaml")
    with xr.open_dataset(results / "ranking.nc") as r:
        importance = r["species_importance"].sel(graph_method="drgep").values
        targets = r.attrs["graph_targets"].split(", ")
    # the feed's fuel and oxidizer are targets (importance 1 by definition); inert N2 is not
    assert {"H2", "O2"} <= set(targets) and "N2" not in targets
    assert importance[full.species_index("H2")] == 1.0
    for cut in out["cuts"]:
        reduced = ct.Solution(str(cut.path))  # loads on its own (Cantera as the judge)
        kept = set(reduced.species_names)
        # by hand from Cantera's reaction list: a reaction stays only when all its species stay
        # (N2 and AR are kept as diluents/colliders whatever the graph says)
        if cut.criterion in ("drg", "drgep"):
            expected = [r.equation for r in full.reactions()
                        if set(r.reactants) | set(r.products) <= kept]
            assert reduced.reaction_equations() == expected
        assert {"N2", "AR", "H2", "O2"} <= kept
    by_name = {c.name: c for c in out["cuts"]}
    # H2O2's largest DRGEP importance lies below 0.9 on this grid: the 0.9 cut drops it, the 0.1 cut keeps it
    h2o2 = importance[full.species_index("H2O2")]
    assert 0.1 < h2o2 < 0.9
    assert "H2O2" not in ct.Solution(str(by_name["drgep-0.9"].path)).species_names
    assert "H2O2" in ct.Solution(str(by_name["drgep-0.1"].path)).species_names
    # nested: a higher threshold keeps a subset of the reactions of a lower one
    for name in ("drg", "drgep", "drgep-sieve"):
        low, high = by_name[f"{name}-0.1"].keep, by_name[f"{name}-0.9"].keep
        assert not (high & ~low).any()
    # the combined criterion keeps a subset of DRGEP's reactions and of the local criterion's
    sieve = by_name["drgep-sieve-0.1"].keep
    assert not (sieve & ~by_name["drgep-0.1"].keep).any()
    local = rank.kept_reactions(xr.open_dataset(results / "ranking.nc"), "local", config["reduction"]["sieve_share"])
    assert not (sieve & ~local).any()


def test_the_table_names_the_smallest_cut_per_criterion(hydrogen):
    _, results, out = hydrogen
    table = out["table"]
    assert set(table["criterion"]) == {"local", "drg", "drgep", "drgep-sieve"}
    with xr.open_dataset(results / "reduction.nc") as ds:
        by = dict(part.split(": ") for part in ds.attrs["smallest_by_criterion"].split("; "))
        assert ds["largest_error_ratio"].attrs["units"] == "1"
    for criterion, name in by.items():
        rows = table[table["criterion"] == criterion]
        fits = rows[rows["within_tolerances"]]
        if name == "none":
            assert fits.empty
            continue
        best = rows.set_index("cut").loc[name]
        assert best["species [1]"] == fits["species [1]"].min()
        # the ratio is the worst error over its tolerance (closed form from the row itself)
        tol = {"ignition_delay_error_max [1]": 0.05, "equilibrium_temperature_error_max [K]": 2.0,
               "entropy_produced_error_max [1]": 0.02}
        assert best["largest_error_ratio [1]"] == pytest.approx(max(best[k] / t for k, t in tol.items()))


def test_a_case_short_of_equilibrium_is_judged_at_its_end_time(hydrogen, tmp_path):
    # the local-0.01 cut relaxes more slowly; a max_time shorter than its relaxation but past the
    # full run's ends its cases short of equilibrium, which is then no failure: it is compared
    # with the full path at the same time (the full run reached equilibrium, held beyond its end)
    config, results, _ = hydrogen
    summary = xr.open_dataset(results / "summary.nc").load()
    cut = results / "reduced" / "drgep-0.9.yaml"
    short = dict(config, stop=dict(config["stop"], max_time=float(summary["time_to_99pct"].max()) * 1.01))
    v = rank.assess_cut(short, cut, summary, tmp_path / "cases", "short", report=lambda s: None,
                        full_cases_dir=results / "cases")
    status = v["cut_status"].values.astype(str)
    judged = v["cut_judged_at_end"].values.astype(bool)
    assert judged.any() and ((status == "not-relaxed") == judged).all()
    assert not v["cut_failed"].values[judged].any()
    assert np.isfinite(v["equilibrium_temperature_error"].values[judged]).all()


def test_gri30_nitrogen_chemistry_is_removable_for_methane_ignition(tmp_path):
    # common practice: GRI-Mech 3.0 without its nitrogen chemistry keeps 36 species, N2 included
    # (from memory), and methane-air ignition does not need that chemistry. The cut goes through
    # the species-cut rule of the graph criteria (every reaction of a removed species goes) and is
    # validated like any cut: the ignition delay must stay within the default tolerance (5 %).
    config = config_mod.validate({
        "mechanism": "gri30.yaml", "reactors": ["isolated"],
        "feed": {"fuel": "CH4:1", "oxidizer": AIR, "equivalence_ratio": [0.7, 1.3]},
        "temperature": [1400.0], "pressure": [101325.0], "stop": {"max_time": 0.05},
        "storage": {"max_samples": 150}, "sea": {"enabled": False}})
    runner.run_grid(config, tmp_path, report=lambda s: None)
    gas = ct.Solution("gri30.yaml")
    nitrogen = {s.name for s in gas.species() if "N" in s.composition} - {"N2"}
    importance = np.array([0.0 if s in nitrogen else 1.0 for s in gas.species_names])
    keep = criteria.species_cut(gas, importance, 0.5, rank.always_kept(gas, config))
    species = rank.species_to_keep(gas, keep, config)
    path = rank.write_yaml_atomic(rank.reduced_solution(mechanism.resolve("gri30.yaml"), keep, species), tmp_path / "no-n.yaml",
                                  "GRI-Mech 3.0 without nitrogen chemistry (test)")
    reduced = ct.Solution(str(path))  # loads on its own
    assert reduced.n_species == 36 and "N2" in reduced.species_names
    assert not nitrogen & set(reduced.species_names)
    summary = xr.open_dataset(tmp_path / "summary.nc").load()
    v = rank.assess_cut(config, path, summary, tmp_path / "cut-cases", "no-n", report=lambda s: None,
                        full_cases_dir=tmp_path / "cases")
    assert not v["cut_failed"].values.any()
    assert np.all(v["ignition_delay_error"].values <= config["reduction"]["max_ignition_delay_error"])
