"""sahaboltz: LTE Saha-Boltzmann equilibrium of gas mixtures."""

__version__ = "0.1.0"

from sahaboltz.errors import SahaboltzError  # noqa: F401
