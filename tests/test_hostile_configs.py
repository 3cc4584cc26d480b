"""Hostile configs: every malformed or absurd config ends in one clear line naming the field.

The bulk (600 generated configs) goes through ``config.validate`` + ``grid.expand`` in this
process, which is exactly what the CLI and the workflow run first; a sample of each kind goes
through the real ``sigmagrid run`` command and through Snakemake to show the exit status, the
single stderr line, the absence of a traceback and the absence of any output file.

The expectation for each kind of damage is the project's own rule (DEVELOPERS: bad input names the
field and the allowed values, exits non-zero, writes nothing); no outside reference applies.
"""

from __future__ import annotations

import copy
import json
import math
import random
import shutil
import subprocess
import sys

import pytest
import yaml
from hypothesis import HealthCheck, given, settings, strategies as st

from conftest import count_tried, run_cli
from sigmagrid import config as config_mod, grid as grid_mod, mechanism
from sigmagrid.errors import InputError

BASE = {
    "study": "reformer preheat screening (test)",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated", "constant-pressure"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.6, 1.0]},
    "compositions": [{"name": "wet", "composition": "H2:2, O2:1, H2O:1, N2:3.76"}],
    "temperature": [1050.0, 1150.0],
    "pressure": [101325.0],
    "stop": {"max_time": 0.5, "progress_tolerance": 1e-8, "ignition_rise": 50.0},
    "solver": {"rtol": 1e-10, "atol": 1e-20, "max_steps": 100000},
    "reactor_volume": 1e-3,
    "storage": {"max_samples": 200, "max_bytes": 16e6},
    "batch": {"cases_per_job": 4, "max_cases": 1000},
}

# (path, kind) of every leaf a user sets; kind says what damage applies.
NUMBER_LEAVES = ["temperature[0]", "pressure[0]", "feed.equivalence_ratio[1]", "stop.max_time",
                 "stop.progress_tolerance", "stop.ignition_rise", "solver.rtol", "solver.atol", "reactor_volume",
                 "storage.max_bytes"]
INTEGER_LEAVES = ["solver.max_steps", "storage.max_samples", "batch.cases_per_job", "batch.max_cases"]
LIST_LEAVES = ["reactors", "temperature", "pressure", "feed.equivalence_ratio", "compositions"]
STRING_LEAVES = ["mechanism", "study", "feed.fuel", "feed.oxidizer", "compositions[0].composition",
                 "compositions[0].name"]
SECTIONS = ["stop", "solver", "storage", "batch", "feed"]
REQUIRED = ["mechanism", "reactors", "temperature", "pressure", "feed.fuel", "feed.oxidizer",
            "feed.equivalence_ratio", "compositions[0].name", "compositions[0].composition"]
# Values above the schema's maxima (and what the schema allows), or zero/negative where > 0 is required.
TOO_BIG = {"temperature[0]": 6001.0, "pressure[0]": 2e9, "feed.equivalence_ratio[1]": 1001.0,
           "stop.max_time": 2e6, "stop.progress_tolerance": 0.5, "solver.rtol": 0.01, "solver.atol": 1e-3,
           "solver.max_steps": 10**9, "storage.max_samples": 10**6, "batch.cases_per_job": 10**6}
INTEGER_MINIMUM = {"solver.max_steps": 10, "storage.max_samples": 10, "batch.cases_per_job": 1,
                   "batch.max_cases": 1}


def _parts(path: str) -> list:
    out = []
    for piece in path.replace("]", "").split("."):
        name, *index = piece.split("[")
        out.append(name)
        out += [int(i) for i in index]
    return out


def _set(raw: dict, path: str, value) -> None:
    *head, last = _parts(path)
    node = raw
    for key in head:
        node = node[key]
    node[last] = value


def _delete(raw: dict, path: str) -> None:
    *head, last = _parts(path)
    node = raw
    for key in head:
        node = node[key]
    del node[last]


def _section_of(path: str) -> str:
    return path.split("[")[0].split(".")[0]


def _wrong_type_for(path: str, rng: random.Random):
    if path in NUMBER_LEAVES or path in INTEGER_LEAVES:
        candidates = ["1000", True, None, {"value": 1}, [1.0]]
        if path in INTEGER_LEAVES:
            candidates.append(2.5)
    elif path in LIST_LEAVES:
        candidates = ["1000", 1000.0, {"a": 1}, None, True]
    else:
        candidates = [12.0, ["H2:1"], {"H2": 1}, None, False]
    return rng.choice(candidates)


def mutate(kind: str, rng: random.Random, outside_mechanism: str = "") -> tuple[object, set[str]]:
    """A damaged copy of BASE and the field names an acceptable message may name."""
    raw = copy.deepcopy(BASE)
    if kind == "wrong-type":
        path = rng.choice(NUMBER_LEAVES + INTEGER_LEAVES + LIST_LEAVES + STRING_LEAVES)
        _set(raw, path, _wrong_type_for(path, rng))
        return raw, {path}
    if kind == "missing-key":
        path = rng.choice(REQUIRED)
        _delete(raw, path)
        return raw, {path}
    if kind == "no-feed-at-all":
        del raw["feed"], raw["compositions"]
        return raw, {"feed"}
    if kind == "unknown-key":
        name = rng.choice(["temperatures", "colour", "Pressure", "maxtime", "solvr", "T", "phi", "out_dir"])
        where = rng.choice(["", *SECTIONS, "compositions[0]"])
        if where:
            *head, last = _parts(where)
            node = raw
            for key in head + [last]:
                node = node[key]
            node[name] = 1
            return raw, {f"{where}.{name}"}
        raw[name] = [1]
        return raw, {name}
    if kind == "not-finite":
        path = rng.choice(NUMBER_LEAVES)
        _set(raw, path, rng.choice([math.nan, math.inf, -math.inf]))
        return raw, {path}
    if kind == "not-finite-text":  # what a YAML 1.1 loader hands over for .nan / 1e400
        path = rng.choice(NUMBER_LEAVES)
        _set(raw, path, rng.choice(["1e400", "-1e400"]))
        return raw, {path}
    if kind == "empty-list":
        path = rng.choice(LIST_LEAVES)
        _set(raw, path, [])
        return raw, {path}
    if kind == "zero-or-negative":
        path = rng.choice(NUMBER_LEAVES + INTEGER_LEAVES)
        if path in INTEGER_LEAVES:
            value = rng.choice([0, -1, -10**6, INTEGER_MINIMUM[path] - 1])
        else:
            value = rng.choice([0.0, -0.0, -1.0, -1e-300, -5e3])
        _set(raw, path, value)
        return raw, {path}
    if kind == "too-big":
        path = rng.choice(sorted(TOO_BIG))
        _set(raw, path, TOO_BIG[path] * rng.choice([1, 10, 1000]))
        return raw, {path}
    if kind == "huge-grid":
        n_t, n_p = rng.randint(58, 90), rng.randint(58, 90)  # > 20000 cases with 2 reactors x 3 mixtures
        raw["temperature"] = [800.0 + 5.0 * i for i in range(n_t)]
        raw["pressure"] = [1e5 + 1e3 * i for i in range(n_p)]
        raw["batch"].pop("max_cases")  # the default limit, 20000
        return raw, {"batch.max_cases"}
    if kind == "unknown-species":
        path = rng.choice(["feed.fuel", "feed.oxidizer", "compositions[0].composition"])
        species = rng.choice(["CH4", "XX", "h2", "O3", "Ar2", "NH3", "C8H18"])
        _set(raw, path, f"{species}:1, N2:1" if path != "feed.fuel" else f"{species}:1")
        return raw, {path}
    if kind == "bad-composition":
        path = rng.choice(["feed.fuel", "feed.oxidizer", "compositions[0].composition"])
        text = rng.choice(["H2=1", "H2:abc", "H2:-1", "H2:0", ":1", "H2:1,,O2:1", "H2:1 O2:1", "H2:nan",
                           "H2:1,H2:2", "   ", "H2:1e400"])
        _set(raw, path, text)
        return raw, {path}
    if kind == "duplicate-axis":
        path = rng.choice(["temperature", "pressure", "feed.equivalence_ratio", "reactors"])
        values = {"temperature": [1100.0, 1100.0], "pressure": [101325, 101325.0],
                  "feed.equivalence_ratio": [1.0, 1], "reactors": ["isolated", "isolated"]}[path]
        _set(raw, path, values)
        return raw, {path}
    if kind == "duplicate-case":  # the same physical mixture twice under two names
        raw["compositions"] = [{"name": "a", "composition": "H2:2,O2:1"}, {"name": "b", "composition": "H2:4,O2:2"}]
        return raw, {"grid"}
    if kind == "duplicate-name":
        raw["compositions"] = [{"name": "a", "composition": "H2:2,O2:1"}, {"name": "a", "composition": "H2:1,O2:1"}]
        return raw, {"compositions"}
    if kind == "bad-reactor":
        raw["reactors"] = [rng.choice(["piston", "Isolated", "adiabatic", "", "psr", 3])]
        return raw, {"reactors[0]"}
    if kind == "bad-name":
        raw["compositions"][0]["name"] = rng.choice(["", "has space", "../../etc", "x" * 60, "-lead"])
        return raw, {"compositions[0].name"}
    if kind == "missing-path":
        raw["mechanism"] = rng.choice(["no/such/dir/mech.yaml", "missing.yaml", "/nonexistent/gri30.yaml",
                                       "gri31.yaml", "~/nowhere.yaml", ""])
        return raw, {"mechanism"}
    if kind == "special-path":
        raw["mechanism"] = rng.choice(["/dev/null", "/dev/zero", "/", "/tmp", "."])
        return raw, {"mechanism"}
    if kind == "outside-project":
        raw["mechanism"] = outside_mechanism
        return raw, {"mechanism"}
    if kind == "shared-references":  # what YAML anchors expand to: 10^k leaves from a few objects
        level = [1000.0] * 10
        for _ in range(rng.randint(6, 9)):
            level = [level] * 10
        raw["temperature"] = level
        return raw, {"config"}
    if kind == "not-a-mapping":
        return rng.choice([[1, 2], "mechanism: h2o2.yaml", 42, None, 3.5]), {"config"}
    raise AssertionError(kind)


KINDS = ["wrong-type", "missing-key", "no-feed-at-all", "unknown-key", "not-finite", "not-finite-text",
         "empty-list", "zero-or-negative", "too-big", "huge-grid", "unknown-species", "bad-composition",
         "duplicate-axis", "duplicate-case", "duplicate-name", "bad-reactor", "bad-name", "missing-path",
         "special-path", "outside-project", "shared-references", "not-a-mapping"]


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A project folder, and a real mechanism file lying outside it."""
    root = tmp_path_factory.mktemp("project")
    elsewhere = tmp_path_factory.mktemp("elsewhere") / "h2o2-copy.yaml"
    shutil.copy(mechanism.resolve("h2o2.yaml"), elsewhere)
    return root, str(elsewhere)


def test_the_base_config_is_good(project):
    root, _ = project
    grid = grid_mod.expand(config_mod.validate(copy.deepcopy(BASE)), project_root=root)
    assert len(grid.cases) == 2 * 3 * 2  # reactors x (2 phi + 1 composition) x temperatures


def check_refused(raw, fields: set[str], root) -> InputError:
    with pytest.raises(InputError) as caught:
        grid_mod.expand(config_mod.validate(raw), project_root=root)
    err = caught.value
    assert err.field in fields, (err.field, err.message, fields)
    assert len(err.message) >= 10 and "\n" not in err.message
    return err


@settings(max_examples=650, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                  HealthCheck.too_slow])
@given(kind=st.sampled_from(KINDS), rng=st.randoms(use_true_random=False))
def test_generated_hostile_configs_are_refused_naming_the_field(project, kind, rng):
    root, outside = project
    raw, fields = mutate(kind, rng, outside)
    err = check_refused(raw, fields, root)
    if kind in ("bad-reactor", "wrong-type") and "allowed values" in err.message:
        assert "isolated" in err.message
    # (shared references would expand to 10^9 leaves in JSON: name them by their depth instead)
    key = _depth_key(raw) if kind == "shared-references" else json.dumps(raw, sort_keys=True, default=repr)
    if key not in SEEN:  # hypothesis may replay an example; count each config once
        SEEN.add(key)
        count_tried("hostile configs, in-process (validate + expand), distinct")
        count_tried(f"hostile configs of kind {kind}, distinct")


SEEN: set[str] = set()


def _depth_key(raw) -> str:
    depth, node = 0, raw["temperature"]
    while isinstance(node, list):
        depth, node = depth + 1, node[0]
    return f"shared-references depth {depth}"


def test_messages_say_what_is_allowed(project):
    root, outside = project
    expected = {  # kind -> text the message must contain
        "bad-reactor": "allowed values: isolated, constant-pressure, isothermal",
        "unknown-key": "allowed keys",
        "not-finite": "finite",
        "empty-list": "at least 1",
        "huge-grid": "raise batch.max_cases",
        "unknown-species": "its species are",
        "outside-project": "copy the mechanism into the project",
        "special-path": "not a regular file",
        "missing-path": "give an existing path or a name Cantera ships",
    }
    for kind, text in expected.items():
        for seed in range(5):
            raw, fields = mutate(kind, random.Random(seed), outside)
            err = check_refused(raw, fields, root)
            if kind == "missing-path" and raw["mechanism"] == "":
                continue  # the schema's minLength message: "'' is not a valid value"
            assert text in err.message, (kind, err.message)
            count_tried("hostile configs, message wording")


# --- through the real command and the real workflow ------------------------------------------


def _write(folder, raw) -> str:
    path = folder / "config.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False) if raw is not None else "null\n")
    return str(path)


# The plain command accepts a mechanism anywhere (only the workflow insists on the project folder).
CLI_SAMPLE = [(kind, seed) for seed, kind in enumerate(KINDS)
              if kind in ("wrong-type", "missing-key", "unknown-key", "not-finite", "empty-list", "zero-or-negative",
                          "huge-grid", "unknown-species", "bad-composition", "duplicate-axis", "special-path",
                          "missing-path", "not-a-mapping")]


@pytest.mark.parametrize("kind,seed", CLI_SAMPLE)
def test_the_command_refuses_with_one_line_and_writes_nothing(tmp_path, project, kind, seed):
    _, outside = project
    raw, fields = mutate(kind, random.Random(seed), outside)
    project_dir = tmp_path / "work"
    project_dir.mkdir()
    config_path = _write(project_dir, raw)
    done = run_cli("run", config_path, "--results", str(project_dir / "results"), cwd=project_dir)
    assert done.returncode == 2, (done.returncode, done.stderr[-2000:])
    assert "Traceback" not in done.stderr + done.stdout
    errors = [ln for ln in done.stderr.splitlines() if ln.startswith("sigmagrid: error: ")]
    assert len(errors) == 1, done.stderr
    assert any(errors[0].startswith(f"sigmagrid: error: {f}: ") for f in fields), (errors, fields)
    assert sorted(p.name for p in project_dir.iterdir()) == ["config.yaml"]
    count_tried("hostile configs, through `sigmagrid run`")


WORKFLOW_SAMPLE = ["not-finite", "unknown-species", "outside-project"]


@pytest.mark.parametrize("kind", WORKFLOW_SAMPLE)
def test_the_workflow_refuses_before_any_rule_and_writes_nothing(workdir, project, kind):
    _, outside = project
    raw, fields = mutate(kind, random.Random(7), outside)
    (workdir / "config" / "config.yaml").write_text(yaml.safe_dump(raw, sort_keys=False))
    done = subprocess.run([sys.executable, "-m", "snakemake", "--cores", "1"], cwd=workdir,
                          capture_output=True, text=True, timeout=300)
    text = done.stdout + done.stderr
    assert done.returncode != 0
    assert "Traceback" not in text
    assert any(f"sigmagrid: error: {f}: " in text for f in fields), text[-2000:]
    assert not (workdir / "results").exists()
    count_tried("hostile configs, through Snakemake")
