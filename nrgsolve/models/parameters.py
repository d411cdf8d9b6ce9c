"""The impurity parameters that several models share, declared once.

Each model file picks the ones it uses (see :mod:`nrgsolve.models.registry`);
a model with a parameter of its own declares it in its own file.  Units:
energies in units of the half-bandwidth D; ``exchange`` and
``potential_scattering`` are the dimensionless ρJ, ρK with ρ = 1/(2D) and
J > 0 antiferromagnetic; ``hybridization`` is Γ = πρV² at the Fermi level;
``field`` is the Zeeman energy h on the impurity, H = −h S_z.
"""

from __future__ import annotations

from ..keys import Key, NUM, finite, coupling_in_range, MAX_COUPLING, MAX_ENERGY

__all__ = ["EXCHANGE", "EXCHANGE_SECOND_CHANNEL", "POTENTIAL_SCATTERING", "SPIN", "LEVEL", "INTERACTION",
           "HYBRIDIZATION", "FIELD", "MAX_SPIN"]

#: Largest impurity spin S: 2S + 1 = 9 states is far beyond the spin-S Kondo problems studied.
MAX_SPIN = 4.0

EXCHANGE = Key(NUM, 0.15, "ρJ (dimensionless)", f"|ρJ| <= {MAX_COUPLING:g}; > 0 antiferromagnetic, < 0 ferromagnetic",
               "Kondo exchange coupling ρJ, ρ = 1/(2D)", coupling_in_range)
EXCHANGE_SECOND_CHANNEL = Key(NUM, None, "ρJ (dimensionless)", f"|ρJ| <= {MAX_COUPLING:g} (default: equal to exchange)",
                              "two-channel Kondo: exchange coupling to the second channel", coupling_in_range)
POTENTIAL_SCATTERING = Key(NUM, 0.0, "ρK (dimensionless)", f"|ρK| <= {MAX_COUPLING:g}",
                           "Kondo model: potential scattering ρK at the impurity site", coupling_in_range)
SPIN = Key(NUM, 0.5, "ħ", f"0.5, 1, 1.5, 2, ... up to {MAX_SPIN:g}", "spin-Kondo model: impurity spin S",
           lambda s: finite(s) and s > 0 and abs(2 * s - round(2 * s)) < 1e-12 and s <= MAX_SPIN)
LEVEL = Key(NUM, None, "D", f"|ε_d| <= {MAX_ENERGY:g} D (default: −interaction/2, the symmetric point)",
            "Anderson model: level energy ε_d", finite)
INTERACTION = Key(NUM, 0.1, "D", f">= 0 and <= {2 * MAX_ENERGY:g} D", "Anderson model: on-site repulsion U",
                  lambda u: finite(u) and u >= 0)
HYBRIDIZATION = Key(NUM, 0.01, "D", f"> 0 and <= {MAX_ENERGY:g} D",
                    "Anderson/resonant level: Γ = πρV² at the Fermi level", lambda g: finite(g) and g > 0)
FIELD = Key(NUM, 0.0, "D", f"|h| <= {MAX_ENERGY:g} D (non-zero needs run.symmetry = \"abelian\" or \"auto\")",
            "Zeeman energy h on the impurity, H = −h S_z", finite)
