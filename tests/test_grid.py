"""Case ids are stable: derived from physics and mechanism content only."""

import shutil

import pytest

from sigmagrid import config as config_mod, grid as grid_mod, mechanism
from sigmagrid.errors import InputError


def base(**kw):
    raw = {"mechanism": "h2o2.yaml", "reactors": ["isolated"], "temperature": [1000.0], "pressure": [101325.0],
           "compositions": [{"name": "a", "composition": "H2:2,O2:1,N2:3.76"}]}
    raw.update(kw)
    return config_mod.validate(raw)


def test_same_inputs_same_id():
    a = grid_mod.expand(base()).cases[0]
    b = grid_mod.expand(base(compositions=[{"name": "renamed", "composition": "N2:7.52, O2:2, H2:4"}])).cases[0]
    assert a.case_id == b.case_id  # order, scale and name of the composition do not matter
    assert a.case_id == grid_mod.expand(base(stop={"max_time": 3.0})).cases[0].case_id
    assert len(a.case_id) == 16


def test_id_follows_mechanism_content(tmp_path):
    copy = tmp_path / "same.yaml"
    shutil.copy(mechanism.resolve("h2o2.yaml"), copy)
    a = grid_mod.expand(base()).cases[0]
    assert grid_mod.expand(base(mechanism=str(copy))).cases[0].case_id == a.case_id
    copy.write_text(copy.read_text().replace("description:", "description: edited\n  ", 1))
    assert grid_mod.expand(base(mechanism=str(copy))).cases[0].case_id != a.case_id


def test_id_changes_with_physics():
    ids = {grid_mod.expand(base(temperature=[t])).cases[0].case_id for t in (1000.0, 1000.001)}
    ids |= {grid_mod.expand(base(reactors=["constant-pressure"])).cases[0].case_id}
    assert len(ids) == 3


def test_duplicate_physical_case_is_refused():
    with pytest.raises(InputError, match="same physical case"):
        grid_mod.expand(base(compositions=[{"name": "a", "composition": "H2:2,O2:1"},
                                           {"name": "b", "composition": "H2:4,O2:2"}]))


def test_grid_size_guard():
    with pytest.raises(InputError) as err:
        grid_mod.expand(base(temperature=[1000.0 + i for i in range(30)], batch={"max_cases": 10}))
    assert err.value.field == "batch.max_cases"
