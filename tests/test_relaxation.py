"""The relaxation and its entropy bookkeeping against identities of thermodynamics and Cantera."""

import cantera as ct
import numpy as np
import pytest
import yaml

from sigmagrid import mechanism, reactors

HELD = {"isolated": "UV", "constant-pressure": "HP", "isothermal": "TP"}


def relaxed(case_files):
    return {k: v for k, v in case_files.items() if v.attrs["status"] == "relaxed"}


def test_every_case_relaxes(case_files):
    # the isothermal reactor included: its own maximum time (1e6 s) lets the slow tail finish
    assert len(case_files) == 12
    for label, ds in case_files.items():
        assert ds.attrs["status"] == "relaxed", (label, ds.attrs["reason"])


#: largest balance residual measured on these 12 cases: 1.19e-5 (constant-pressure, rich, 10 atm,
#: the cases of test_end_state_is_cantera_equilibrium); asserted with a 10x margin
BALANCE_RESIDUAL_LIMIT = 1.2e-4


def test_entropy_balance_from_the_stored_file(case_files):
    # dS/dt = V sigma for (U,V) and (H,P) fixed; d(S - H/T)/dt = V sigma at (T,P) fixed
    # (de Groot and Mazur 1962, ch. X). Checked from the file: Delta of the stored potential
    # (Cantera's entropy) against the sum of entropy_produced (Cantera's affinities and rates).
    for label, ds in case_files.items():
        change = float(ds["potential"][-1] - ds["potential"][0])
        produced = float(ds["entropy_produced"].sum())
        assert abs(change - produced) / change <= BALANCE_RESIDUAL_LIMIT, label
        if ds.attrs["reactor"] != "isothermal":
            assert np.allclose(ds["entropy"], ds["potential"])
        assert float(ds["balance_residual"]) <= BALANCE_RESIDUAL_LIMIT


#: measured on the 12 cases below (largest over them), asserted with a 10x margin:
#: |T_end - T_eq| 0.24 K; max |X_end - X_eq| 2.8e-5 (adiabatic), 3.2e-7 (isothermal)
END_TEMPERATURE_LIMIT = 2.5  # K
END_MOLE_FRACTION_LIMIT = {"isolated": 3e-4, "constant-pressure": 3e-4, "isothermal": 3e-6}


@pytest.mark.parametrize("reactor", list(HELD))
@pytest.mark.parametrize("composition", ["H2:2,O2:1,N2:3.76", "H2:4,O2:1,N2:3.76"])
@pytest.mark.parametrize("pressure", [ct.one_atm, 10 * ct.one_atm])
def test_end_state_is_cantera_equilibrium(h2o2, reactor, composition, pressure):
    """Reference: Cantera's equilibrate with the reactor's pair held fixed, from the initial state,
    with the VCS solver (the code uses the element-potential solver from the path's end). The end
    potential is within the tolerance of the reference's; a margin of 10 % covers the two solvers."""
    gas, info = h2o2
    settings = reactors.RelaxSettings()
    r = reactors.relax(gas, info, reactor, 1100.0, pressure, composition, settings)
    assert r.status == "relaxed", r.reason
    ref = ct.Solution("h2o2.yaml")
    ref.TPX = 1100.0, pressure, composition
    ref.equilibrate(HELD[reactor], solver="vcs")
    potential_eq = r.mass * (ref.entropy_mass - (ref.enthalpy_mass / ref.T if reactor == "isothermal" else 0.0))
    drive = potential_eq - r.potential[0]
    assert drive > 0
    assert potential_eq - r.potential[-1] <= 1.1 * settings.progress_tolerance * drive
    assert r.temperature[-1] == pytest.approx(ref.T, abs=END_TEMPERATURE_LIMIT)
    gas.TDY = r.temperature[-1], r.density[-1], r.mass_fractions[-1]
    assert np.abs(gas.X - ref.X).max() <= END_MOLE_FRACTION_LIMIT[reactor]


def test_stored_equilibrium_has_zero_affinities(case_files):
    # At equilibrium every affinity vanishes (de Donder): A_j / RT = 0 for every reaction, and the
    # element amounts are those of the feed. Measured largest |A_j/RT| of the stored states: 7.5e-11;
    # limit 1e-8, ten times the relative tolerance of Cantera's equilibrate (rtol=1e-9, its default).
    gas = ct.Solution("h2o2.yaml")
    for label, ds in case_files.items():
        x_eq = ds["equilibrium_mole_fraction"].values
        gas.TPX = ds.attrs["initial_temperature"], ds.attrs["initial_pressure"], ds.attrs["composition"]
        if ds.attrs["reactor"] == "isolated":  # same volume and mass: same density
            gas.TDX = float(ds["equilibrium_temperature"]), gas.density, x_eq
        else:
            gas.TPX = float(ds["equilibrium_temperature"]), ds.attrs["initial_pressure"], x_eq
        assert np.abs(gas.delta_gibbs / (ct.gas_constant * gas.T)).max() <= 1e-8, label
        elements_eq = [gas.elemental_mole_fraction(e) for e in ("H", "O", "N")]
        gas.TPX = 300.0, ct.one_atm, ds.attrs["composition"]
        elements_0 = [gas.elemental_mole_fraction(e) for e in ("H", "O", "N")]
        assert np.allclose(elements_eq, elements_0, rtol=1e-9), label


def test_de_donder_inequality_for_reversible_reactions(case_files):
    # de Donder: A_j q_j >= 0 for every reversible reaction whose reverse rate follows from K_c.
    for label, ds in case_files.items():
        sigma = ds["entropy_production"].values
        peak = ds["entropy_production_total"].max().item()
        reversible = ds["reversible"].values.astype(bool)
        assert sigma[:, reversible].min() >= -1e-9 * peak, label
        assert float(ds["worst_reversible_ratio"]) >= -1e-9


def test_rates_and_affinity_consistent_in_file(case_files):
    # q = r+ - r- and q = r+ (1 - exp(-x)) (mass action with detailed balance); the samples are
    # stored to 4-5 significant digits (store.SIGNIFICANT_DIGITS), hence the tolerances.
    from sigmagrid import store

    ds = case_files["isolated_phi1_T1100K_P1.01325bar"]
    rf, rr, q = (ds[v].values.astype(float) for v in ("forward_rate", "reverse_rate", "net_rate"))
    scale = np.abs(rf).max(axis=0)
    # the difference of two 4-digit numbers is good to about 1e-4 of the larger one
    assert np.all(np.abs(q - (rf - rr)) <= 1e-3 * np.maximum(np.abs(rf), np.abs(rr)) + 1e-12 * scale.max())
    x = np.clip(store.disequilibrium(ds).values, -50, 50)
    ok = np.abs(x) > 1e-2  # below this the stored digits of q and x cancel
    assert np.allclose(q[ok], (rf * -np.expm1(-x))[ok], rtol=1e-2, atol=1e-6 * scale.max())


def test_linear_regime_near_equilibrium(case_files):
    # Onsager/de Donder: q_j / (r+_j x_j) -> 1 as x_j -> 0.
    ds = case_files["isolated_phi1_T1100K_P1.01325bar"]
    from sigmagrid import mechanism as mech

    gas = mech.load(mech.resolve("h2o2.yaml"))
    gas.TPX = ds.attrs["initial_temperature"], ds.attrs["initial_pressure"], ds.attrs["composition"]
    gas.equilibrate("UV")
    x_eq = gas.X.copy()
    ratios = []
    for eps in (1e-2, 1e-3, 1e-4):
        gas.TPX = gas.T, gas.P, x_eq * (1 + eps * np.linspace(-1, 1, gas.n_species))
        from sigmagrid import diagnostics

        state = diagnostics.evaluate(gas, [gas.T], [gas.density], [gas.Y])
        x, q, rf = state.disequilibrium[0], state.net_rate[0], state.forward_rate[0]
        mask = (np.abs(x) > 1e-12) & (rf > 0)
        ratios.append(np.max(np.abs(q[mask] / (rf[mask] * x[mask]) - 1)))
    assert ratios[0] > ratios[1] > ratios[2]
    assert ratios[2] < 1e-3


def test_progress_and_times(case_files):
    for label, ds in relaxed(case_files).items():
        lam = ds["path_progress"].values
        assert lam[0] == 0.0 and lam[-1] == pytest.approx(1.0, abs=1e-6)
        t = ds["time_to_progress"].values
        assert np.all(np.diff(t) > 0) and np.all(t > 0), label
        if ds.attrs["reactor"] != "isothermal":
            ign = float(ds["ignition_delay"])
            assert t[0] * 0.5 < ign < t[2] * 1.5, label


def test_samples_are_bounded_and_placed_where_the_path_changes(case_files):
    ds = case_files["isolated_phi1_T1100K_P1.01325bar"]
    assert ds.sizes["time"] <= 500
    t = ds["time"].values
    assert np.all(np.diff(t) > 0)
    ign = float(ds["ignition_delay"])
    near = np.sum(np.abs(t - ign) < 0.1 * ign)
    assert near >= 20  # uniform-in-time sampling of a 5 s run would put ~0 samples there


def test_byte_budget_bounds_large_mechanisms(tmp_path):
    """The stored-sample budget in bytes: the sample count follows from the float32 arrays of a
    sample (5 per reaction, 1 per species; 4 bytes each), as in the netCDF variable definitions."""
    from sigmagrid import store
    from conftest import _config
    from sigmagrid import grid as grid_mod, runner

    assert store.sample_budget(500, 16e6, 325, 53) == 500  # gri30: 6.7 kB a sample
    assert store.sample_budget(500, 16e6, 5336, 1268) == 16e6 // (4 * (5 * 5336 + 1268 + 12))
    assert store.sample_budget(500, 1e5, 5336, 1268) == store.MIN_SAMPLES
    config = _config(reactors=["isolated"], storage={"max_samples": 500, "max_bytes": 1e5})
    case = grid_mod.expand(config).cases[0]
    ds = runner.run_single(config, case, tmp_path / "case.nc")
    per_sample = 4 * (5 * ds.sizes["reaction"] + ds.sizes["species"] + 12)
    assert ds.attrs["stored_sample_budget"] == 100_000 // per_sample
    assert ds.sizes["time"] <= 100_000 // per_sample
    assert ds.attrs["status"] == "relaxed"



@pytest.mark.parametrize("name", ["affinity", "forward_rate"])
def test_stored_samples_keep_their_significant_digits(tmp_path, name):
    """BitRound keeps b mantissa bits, a worst relative error of 2^-(b+1) (Kloewer et al. 2021,
    Nature Computational Science 1, 713); d significant digits allow 5 10^-d. Checked on values
    spread over 40 decades, through the netCDF file and back."""
    import xarray as xr
    from sigmagrid import store

    rng = np.random.default_rng(7)
    values = (10.0 ** rng.uniform(-30, 10, 50_000) * rng.choice([-1.0, 1.0], 50_000)).astype(np.float32)
    store.write_atomic(xr.Dataset({name: ("time", values)}), tmp_path / "q.nc")
    with xr.open_dataset(tmp_path / "q.nc") as ds:
        back = ds[name].values.astype(float)
    rel = np.abs(back - values.astype(float)) / np.abs(values.astype(float))
    allowed = 5 * 10.0 ** -store.SIGNIFICANT_DIGITS[name]
    assert rel.max() <= allowed
    assert rel.max() > allowed / 4  # the rounding is really applied: the bits are dropped

def _modified_mechanism(tmp_path, edit):
    data = yaml.safe_load(open(mechanism.resolve("h2o2.yaml")))
    edit(data)
    path = tmp_path / "modified.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def stalled_h2o2(data):
    """A skeletal h2o2: H2O2 formed only by irreversible reactions and consumed by none."""
    kept = []
    for r in data["reactions"]:
        left, _, right = r["equation"].partition("<=>")
        if "H2O2" not in r["equation"]:
            kept.append(r)
        elif "H2O2" in right and "H2O2" not in left:
            kept.append(dict(r, equation=r["equation"].replace("<=>", "=>")))
    data["reactions"] = kept


def test_irreversible_reactions_produce_negative_entropy(tmp_path, h2o2):
    """2 OH (+M) => H2O2 (+M), irreversible, runs on in the hot products where H2O2 is far above its
    equilibrium amount: its affinity is negative, so its entropy production A q / T is negative.
    Checked with the mass-action identity A_j = R T ln(K_c,j / Q_j) from Cantera's equilibrium
    constants and concentrations (not the code's delta-G) and q_j = r+_j (irreversible), integrated
    over the recorded path with the trapezoidal rule as the code does."""
    path = _modified_mechanism(tmp_path, stalled_h2o2)
    gas = mechanism.load(path)
    info = mechanism.describe(gas)
    assert info.n_irreversible == 3
    r = reactors.relax(gas, info, "isolated", 1100.0, ct.one_atm, "H2:2,O2:1,N2:3.76",
                       reactors.RelaxSettings(max_time=1.0))
    j = gas.reaction_equations().index("2 OH (+M) => H2O2 (+M)")
    nu = (gas.product_stoich_coeffs - gas.reactant_stoich_coeffs)[:, j]
    sigma = np.empty(r.time.size)
    for i in range(r.time.size):
        gas.TDY = r.temperature[i], r.density[i], np.clip(r.mass_fractions[i], 1e-300, None)
        log_q = float(nu @ np.log(gas.concentrations))  # kmol/m3
        affinity = ct.gas_constant * gas.T * (np.log(gas.equilibrium_constants[j]) - log_q)  # J/kmol
        sigma[i] = affinity * gas.forward_rates_of_progress[j] / gas.T  # W/(m3 K)
    independent = float(np.trapezoid(sigma * r.volume, r.time))
    assert independent < 0 and r.entropy_produced[j] < 0
    print(f"2 OH => H2O2: produced {r.entropy_produced[j]:.6e} J/K, independent {independent:.6e} J/K, "
          f"balance residual {r.balance_residual:.2e}")
    assert r.entropy_produced[j] == pytest.approx(independent, rel=1e-9)  # measured 1.3e-15: round-off
    assert r.audit.n_irreversible == 3
    assert r.audit.negative_share >= -independent / np.abs(r.entropy_produced).sum() > 0
    assert r.balance_residual <= BALANCE_RESIDUAL_LIMIT


def test_duplicate_with_negative_prefactor_is_checked_per_group(tmp_path):
    # Split H + O2 <=> O + OH into duplicates with A1 = 2A and A2 = -A (sum A): the negative member
    # alone has sigma < 0, the group is the physical reaction and must not.
    def split(data):
        for i, r in enumerate(data["reactions"]):
            if r["equation"] == "H + O2 <=> O + OH":
                a = r["rate-constant"]["A"]
                first = dict(r, duplicate=True, **{"rate-constant": dict(r["rate-constant"], A=2 * a)})
                second = dict(r, duplicate=True, **{"negative-A": True,
                                                    "rate-constant": dict(r["rate-constant"], A=-a)})
                data["reactions"][i:i + 1] = [first, second]
                return
        raise AssertionError("reaction not found")

    path = _modified_mechanism(tmp_path, split)
    gas = mechanism.load(path)
    info = mechanism.describe(gas)
    assert info.negative_prefactor.sum() == 1
    r = reactors.relax(gas, info, "isolated", 1100.0, ct.one_atm, "H2:2,O2:1,N2:3.76",
                       reactors.RelaxSettings(max_time=1.0))
    assert r.status == "relaxed"
    negative = int(np.flatnonzero(info.negative_prefactor)[0])
    assert negative in r.audit.negative_members
    assert r.audit.worst_group_ratio >= -1e-9
    assert r.entropy_produced[negative] < 0
    # the same physics as the unsplit mechanism: same end state
    reference = reactors.equilibrium_of(gas, "isolated", r.mass)
    assert r.temperature[-1] == pytest.approx(reference.temperature, abs=1.0)


def test_mixture_at_equilibrium_has_undefined_progress(h2o2):
    gas, info = h2o2
    gas.TPX = 2500.0, ct.one_atm, "H2:2,O2:1,N2:3.76"
    gas.equilibrate("UV")
    r = reactors.relax(gas, info, "isolated", gas.T, gas.P, gas.X, reactors.RelaxSettings(max_time=1e-3))
    assert r.status == "relaxed" and "already at equilibrium" in r.reason
    assert np.isnan(r.progress).all() and np.isnan(r.progress_time(0.5))
    assert np.isnan(r.balance_residual)


def test_short_maximum_time_is_not_relaxed(h2o2):
    gas, info = h2o2
    r = reactors.relax(gas, info, "constant-pressure", 1000.0, ct.one_atm, "H2:2,O2:1,N2:3.76",
                       reactors.RelaxSettings(max_time=1e-6))
    assert r.status == "not-relaxed" and "maximum time" in r.reason
    assert np.isnan(r.ignition_delay)


@pytest.mark.parametrize("reactor", ["isolated", "constant-pressure"])
def test_deferred_equilibrium_is_the_upfront_one(h2o2, monkeypatch, reactor):
    """A large mechanism's equilibrium is computed once the heat is released, for the initial
    held pair, from the current composition as guess. The reference is Cantera's equilibrate
    from the initial state (the same solver, VCS, on both sides): same end state and same path."""
    gas, info = h2o2
    monkeypatch.setattr(reactors, "LARGE_EQUILIBRIUM_SPECIES", 1)  # h2o2 counts as large
    settings = reactors.RelaxSettings(max_time=1e-2)
    args = (gas, info, reactor, 1000.0, 2 * ct.one_atm, "H2:2,O2:1,N2:3.76", settings)
    calls = []
    original = reactors.equilibrium_of
    monkeypatch.setattr(reactors, "equilibrium_of",
                        lambda *a, **k: calls.append(k.get("guess") is not None) or original(*a, **k))
    deferred = reactors.relax(*args)
    assert calls[0] is True  # deferred: the first equilibrium starts from a guess
    monkeypatch.setattr(reactors, "_far_from_equilibrium", lambda g: False)
    upfront = reactors.relax(*args)
    assert deferred.status == upfront.status == "relaxed"
    assert deferred.equilibrium.temperature == pytest.approx(upfront.equilibrium.temperature, abs=1e-4)
    assert deferred.equilibrium.potential == pytest.approx(upfront.equilibrium.potential, rel=1e-9)
    n = min(deferred.time.size, upfront.time.size)
    assert abs(deferred.time.size - upfront.time.size) <= 2
    assert np.allclose(deferred.temperature[:n], upfront.temperature[:n], rtol=1e-9)
    assert deferred.ignition_delay == pytest.approx(upfront.ignition_delay, rel=1e-9)
    # a guess at the start's own state: the same answer as no guess
    gas.TPX = 1000.0, 2 * ct.one_atm, "H2:2,O2:1,N2:3.76"
    assert original(gas, reactor, 1.0, guess=gas.X).temperature == pytest.approx(
        original(gas, reactor, 1.0).temperature, abs=1e-6)
