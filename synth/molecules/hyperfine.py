"""Hyperfine components of lines whose splitting is comparable to the line widths.

A line with data here is, in the transfer, split into its components: each component k has
the velocity offset v_k = c (nu_0 - nu_k) / nu_0 (radio convention, nu_0 the line's
hyperfine-free rest frequency, the cube's rest frequency) and the fraction s_k of the line's
opacity (sum s_k = 1). All components share the source function of the hyperfine-averaged
level populations (LTE or LVG): the usual approximation, exact when the hyperfine sublevels
are populated in proportion to their statistical weights (they then have one excitation
temperature); it neglects hyperfine anomalies and, for LVG, the overlap of the components in
the escape probability. The thin-limit strengths s_k are the relative line strengths of the
components (sum over the F sublevels of |<F||mu||F'>|^2; Townes & Schawlow 1955, Microwave
Spectroscopy, ch. 6).

Data (component frequencies in MHz, relative strengths):

- HCN J = 1-0: F = 1-1, 2-1, 0-1 at 88630.4160, 88631.8470, 88633.9360 MHz (from memory;
  e.g. Ahrens et al. 2002, Z. Naturforsch. 57a, 669), strengths 3 : 5 : 1 (the (2F+1)
  ratios, common practice).
- N2H+ J = 1-0: seven components (F1 F -> F1' F') with strengths (2F+1)/27, frequencies of
  Caselli, Myers & Thaddeus 1995, ApJ 455, L77 as revised by Pagani, Daniel & Dubernet 2009,
  A&A 494, 719 (from memory).
"""

from dataclasses import dataclass

import numpy as np

from ..errors import ConfigError
from ..sky import C_KMS

__all__ = ["HYPERFINE", "HyperfineComponents", "hyperfine_components", "with_hyperfine"]

#: (species, transition) -> (source, ((label, frequency MHz, relative strength), ...)).
HYPERFINE = {
    ("HCN", "1-0"): ("Ahrens et al. 2002 (frequencies, from memory); strengths (2F+1)",
                     (("F=1-1", 88630.4160, 3.0), ("F=2-1", 88631.8470, 5.0),
                      ("F=0-1", 88633.9360, 1.0))),
    ("N2H+", "1-0"): ("Caselli et al. 1995; Pagani et al. 2009 (from memory); strengths "
                      "(2F+1)/27",
                      (("F1F=11-10", 93171.6086, 3.0), ("F1F=12-12", 93171.9054, 5.0),
                       ("F1F=10-11", 93172.0403, 1.0), ("F1F=21-11", 93173.4675, 3.0),
                       ("F1F=23-12", 93173.7643, 7.0), ("F1F=22-11", 93173.9546, 5.0),
                       ("F1F=01-12", 93176.2527, 3.0))),
}


@dataclass(frozen=True)
class HyperfineComponents:
    """Velocity offsets (km/s, relative to the line's rest frequency), opacity fractions
    (summing to 1), labels and source of a line's hyperfine components."""

    offsets_kms: tuple
    fractions: tuple
    labels: tuple
    source: str


def hyperfine_components(line):
    """HyperfineComponents of a Line, or None when there are no data (or the line comes from
    a user's data file, whose levels are what they are)."""
    if getattr(line, "datafile", None) is not None:
        return None
    entry = HYPERFINE.get((line.species, line.transition))
    if entry is None:
        return None
    source, comps = entry
    nu0_mhz = line.freq_hz / 1e6
    freqs = np.array([c[1] for c in comps])
    strength = np.array([c[2] for c in comps])
    return HyperfineComponents(
        offsets_kms=tuple(float(v) for v in C_KMS * (nu0_mhz - freqs) / nu0_mhz),
        fractions=tuple(float(s) for s in strength / strength.sum()),
        labels=tuple(c[0] for c in comps), source=source)


def with_hyperfine(line, hyperfine=None):
    """The components to use for ``line``: ``hyperfine`` None resolves them where data
    exist, False averages (None returned), True requires the data."""
    if hyperfine is not None and not isinstance(hyperfine, (bool, np.bool_)):
        raise ConfigError(f"hyperfine={hyperfine!r}; valid: true, false or unset")
    if hyperfine is False:
        return None
    comps = hyperfine_components(line)
    if comps is None and hyperfine:
        have = ", ".join(f"{s} {t}" for s, t in HYPERFINE)
        raise ConfigError(f"hyperfine=true: no hyperfine data for {line}"
                                  f"{' (from a data file)' if line.datafile else ''}; "
                                  f"valid: {have}, or hyperfine=false")
    return comps
