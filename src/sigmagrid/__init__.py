"""sigmagrid: grid runs of chemical-kinetics relaxation with entropy-production diagnostics."""

__version__ = "0.1.0"
