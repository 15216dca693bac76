"""Plasma diagnostics: temperature and electron density from measured line intensities.

The inverse of the Saha-Boltzmann problem, for laboratory plasmas (arcs, discharges,
laser-produced plasmas), under three assumptions: optically thin lines, LTE, and a homogeneous
plasma along the line of sight.  See docs/diagnostics.md.

>>> from sahaboltz.diagnostics import read_lines, boltzmann_plot, saha_boltzmann_plot
>>> lines = read_lines("lines.csv")                                  # doctest: +SKIP
>>> fit = boltzmann_plot(lines, "Fe I"); fit.temperature, fit.temperature_error  # doctest: +SKIP
"""

from sahaboltz.diagnostics.boltzmann_plot import BoltzmannFit, boltzmann_plot
from sahaboltz.diagnostics.density import RatioDensity, all_pairs, ratio_density
from sahaboltz.diagnostics.forward import line_emissivity, synthesize, synthetic_line_list
from sahaboltz.diagnostics.lines import LineList, read_lines, write_lines
from sahaboltz.diagnostics.lte import McWhirterCheck, mcwhirter_check
from sahaboltz.diagnostics.saha_boltzmann import SahaBoltzmannFit, saha_boltzmann_plot

__all__ = ["LineList", "read_lines", "write_lines", "boltzmann_plot", "BoltzmannFit",
           "saha_boltzmann_plot", "SahaBoltzmannFit", "ratio_density", "all_pairs",
           "RatioDensity", "synthesize", "synthetic_line_list", "line_emissivity",
           "mcwhirter_check", "McWhirterCheck"]
