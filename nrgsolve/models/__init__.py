"""Impurity models: a registry of declarations, one file per model.

Every model file defines ``MODEL``, a :class:`~nrgsolve.models.registry.ModelDeclaration`
(name, parameters with units and ranges, channels, operators, particle-hole
test, exact curve, block builder); :data:`MODELS` finds them all.  A block is
an :class:`~nrgsolve.engine.ExplicitBlock`: the impurity (and, for Kondo
models, chain site 0) as explicit matrices, the creation operators of the
orbital that couples to the next chain site, and the impurity observables.
The symmetry layer resolves the block into good quantum numbers, so one
definition serves every symmetry mode.

Conventions (all energies in units of the half-bandwidth D):

* Kondo: :math:`H_{imp} = J\\,\\vec S\\cdot\\vec s_0 + K (n_0 - 1) - h S_z`,
  :math:`\\vec s_0 = \\tfrac12 \\sum_{σσ'} f^†_{0σ}\\vec τ_{σσ'} f_{0σ'}`;
  J > 0 is antiferromagnetic; the config gives ρJ and ρK with ρ = 1/(2D).
* Anderson: :math:`H_{imp} = ε_d n_d + U n_{d↑}n_{d↓} - h S_z
  + V_0 \\sum_σ (d^†_σ f_{0σ} + \\mathrm{h.c.})` with
  :math:`V_0^2 = \\frac1π\\int Γ(ε)\\,dε` (flat band: :math:`V_0^2 = 2DΓ/π`).
* h is the Zeeman energy on the impurity only (h > 0 favours spin up).
"""

from .kondo import kondo_block, two_channel_kondo_block
from .anderson import anderson_block
from .bare_chain import bare_chain_block
from .registry import MODELS, ModelDeclaration, ChainContact, model, model_names, impurity_parameters

__all__ = ["kondo_block", "two_channel_kondo_block", "bare_chain_block", "anderson_block", "MODELS",
           "ModelDeclaration", "ChainContact", "model", "model_names", "impurity_parameters"]
