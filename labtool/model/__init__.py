"""Behavioural startup model of a self-biased bandgap core (not transistor-level sign-off).

Design file → DC operating points and feedback map (:mod:`.dc`), one transient as a Capture
(:mod:`.transient`), Monte Carlo measured like silicon (:mod:`.montecarlo`). See docs/model.md.
"""

from labtool.model.dc import DcResult, dc_analysis
from labtool.model.design import PARAMS, Design, load_design
from labtool.model.montecarlo import MonteCarloResult, monte_carlo, sample_population
from labtool.model.transient import DISCLAIMER, simulate

__all__ = ["DISCLAIMER", "PARAMS", "DcResult", "Design", "MonteCarloResult", "dc_analysis", "load_design",
           "monte_carlo", "sample_population", "simulate"]
