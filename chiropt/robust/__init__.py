"""Robustness: fabrication errors, focusing cones and spectral bands around a design.

Owns: the error model (``spec``: which design quantities are off and by how much, the cone's
numerical aperture, the band), the sample plan (``sampling``: scrambled-Sobol normal errors,
Gauss nodes over the cone and the band), the incoherent averages and statistics over the
samples (``average``, differentiable with autograd) and the analysis of one design
(``analysis``: first-order estimate against Monte Carlo, percentiles, yield, band widths).
Must not import: search, store, report, cli, goals.
"""

from chiropt.robust.spec import STATISTICS, ErrorTerm, RobustSpec, parse_robust, parse_sigma_text

__all__ = ["STATISTICS", "ErrorTerm", "RobustSpec", "parse_robust", "parse_sigma_text"]
