"""Settings of the SEA comparison and the names it uses."""

from __future__ import annotations

from dataclasses import dataclass

METRICS = ("log-mean", "onsager", "fitted-scalar", "fitted-diagonal", "fitted-arrhenius")
#: the log-mean path integrates mass action through Cantera (its rates need the full kinetics):
#: a check of the method, opt-in, not a comparison every case pays for
DEFAULT_METRICS = METRICS[1:]
WEIGHTS = ("entropy", "time", "progress")
IRREVERSIBLE_TREATMENTS = ("reversible", "omit")
PROGRESS_LEVELS = (0.5, 0.9, 0.99)
N_SLOW_COMPARED = 5  # slow modes compared in the near-equilibrium check

@dataclass(frozen=True)
class SeaSettings:
    """What the SEA comparison computes and how.

    metrics : subset of :data:`METRICS`.
    start_progress : 1, progress lambda_0 of the observed state the SEA paths start from.
    weight : weight of the fits, ``entropy`` (entropy produced per interval), ``time`` (uniform in
        time) or ``progress`` (uniform in progress; since the progress is affine in the potential
        this is the entropy weight again, kept as a name users look for).
    n_progress : size of the shared progress grid, from ``start_progress`` to ``end_progress``,
        Chebyshev-spaced (dense at both ends).
    end_progress : 1, last grid point (the relaxation only approaches lambda = 1).
    irreversible : ``reversible`` (irreversible reactions get their thermodynamic reverse in the SEA
        dynamics) or ``omit`` (left out of the SEA dynamics and fits).
    rtol, atol : tolerances of the BDF integration of the log-mean path in ln(N) (atol is an
        absolute error of ln N, i.e. a relative error of the amount); tight, since that path must
        reproduce the observed one.
    metric_rtol, metric_atol : the same for the other metrics, whose paths differ from the observed
        one by far more than the integration error (1e-5 gives about 1e-4 rad on gri30).
    max_steps : step budget of one SEA path.
    max_wall_seconds : s, wall-clock budget of one SEA path.
    n_modes : number of slowest relaxation rates stored.
    mobility_floor : 1, every constant or Arrhenius mobility is at least this share of the metric's
        largest (see ``comparison._floored``); part of the stored metric.
    trace_level : 1, amount (over the total) below which a constant or arrhenius mobility is scaled
        down like mass action (see ``_System._trace``); 0 switches it off. The factor is part of
        the stored metric (fits, alignment and fit quality use it), and it changes the paths:
        largest path angle, rad, at trace_level 0 / 1e-10 / 1e-8 / 1e-6, from ``sea.compare``
        with the other settings at their defaults, isolated stoichiometric cases:
        H2-air, h2o2.yaml, 1100 K, 2 atm, onsager 0.292 / 0.293 / 0.304 / 0.330, the fitted
        metrics within 0.007 of each other; CH4-air, gri30.yaml, 1300 K, 1 atm, onsager stalls
        at 0 and gives 0.668 otherwise, fitted-arrhenius 0.250 / 0.231 / 0.182 from 1e-10 on.
        Without it a constant metric drains trace species on time scales far below the solver's
        resolution.
    """

    metrics: tuple[str, ...] = DEFAULT_METRICS
    start_progress: float = 0.01
    weight: str = "entropy"
    n_progress: int = 101
    end_progress: float = 1.0 - 1e-6
    irreversible: str = "reversible"
    rtol: float = 1e-6
    atol: float = 1e-8
    metric_rtol: float = 1e-5
    metric_atol: float = 1e-7
    max_steps: int = 20_000
    max_wall_seconds: float = 120.0
    n_modes: int = 10
    trace_level: float = 1e-8
    mobility_floor: float = 1e-14

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> "SeaSettings":
        """Settings from a config section (keys as the field names, ``-`` or ``_``); checked.

        Raises ``ValueError`` naming an unknown key.
        """
        mapping = dict(mapping or {})
        fields = cls.__dataclass_fields__
        kwargs = {}
        for key, value in mapping.items():
            name = key.replace("-", "_")
            if name not in fields:
                raise ValueError(f"sea.{key}: unknown setting; allowed: {sorted(fields)}")
            kwargs[name] = tuple(value) if name == "metrics" else value
        settings = cls(**kwargs)
        settings.check()
        return settings

    def check(self) -> None:
        """Raise ``ValueError`` naming the bad field."""
        bad = [m for m in self.metrics if m not in METRICS]
        if bad or not self.metrics:
            raise ValueError(f"sea.metrics: {bad or 'empty'}; allowed: {METRICS}")
        if self.weight not in WEIGHTS:
            raise ValueError(f"sea.weight must be one of {WEIGHTS}, not {self.weight!r}")
        if self.irreversible not in IRREVERSIBLE_TREATMENTS:
            raise ValueError(f"sea.irreversible must be one of {IRREVERSIBLE_TREATMENTS}")
        if not 0.0 <= self.start_progress < 0.5:
            raise ValueError(f"sea.start_progress must be in [0, 0.5), not {self.start_progress!r}")
        if not self.start_progress < self.end_progress < 1.0:
            raise ValueError(f"sea.end_progress must be in (start_progress = {self.start_progress!r}, 1), "
                             f"not {self.end_progress!r}")
        for name, least in (("n_progress", 2), ("n_modes", 1), ("max_steps", 1)):
            value = getattr(self, name)
            if not (isinstance(value, int) and value >= least):
                raise ValueError(f"sea.{name} must be a whole number >= {least}, not {value!r}")
        if not 0.0 <= self.mobility_floor < 1.0:
            raise ValueError(f"sea.mobility_floor must be in [0, 1), not {self.mobility_floor!r}")
        if not 0.0 <= self.trace_level <= 1e-3:
            raise ValueError(f"sea.trace_level must be in [0, 1e-3], not {self.trace_level!r}")
        for name in ("rtol", "atol", "metric_rtol", "metric_atol", "max_wall_seconds"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and value > 0):
                raise ValueError(f"sea.{name} must be a number > 0, not {value!r}")
