"""Michaelis-Menten: r = k prod c_i^nu_i / (1 + c_S/K_M), the saturating law with one substrate S and n = 1.

The kernel's adsorption constant is K = 1/K_M: a lognormal prior stays lognormal with the median inverted, and
the enthalpy of binding is minus that of K_M. Everything shown to the user (``check``, ``summary.csv``,
warnings) is K_M and K_M_dH as the study file gives them.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ...errors import StudyError
from ...physics.network import Equation, parse_equation
from .. import units
from .law import (
    Draws,
    KernelTerms,
    RateLaw,
    ResolvedReaction,
    Site,
    StudyUnits,
    ValidatedReaction,
    catalysts,
    lognormal_text,
    normal_text,
    van_t_hoff_prior,
)


class MichaelisMenten(RateLaw):
    """``K_M`` (concentration) and ``K_M_dH`` (van 't Hoff enthalpy of K_M); the enzyme, when written on both
    sides (``S + E -> P + E``), makes k K_M the turnover number k_cat, otherwise k K_M is V_max."""

    name = "michaelis_menten"
    description = "r = k prod c_i^nu_i / (1 + c_S/K_M): the saturating law with one substrate S and n = 1"
    takes = frozenset({"K_M", "K_M_dH"})
    requires = frozenset({"K_M", "K_M_dH"})
    network_only = True

    def kernel_terms(
        self, reaction: ValidatedReaction, equation: Equation, species: tuple[str, ...], energy: str, key: str
    ) -> KernelTerms:
        enzymes = catalysts(equation)
        substrates = [name for name, _ in equation.reactants if name not in enzymes]
        if len(substrates) != 1:
            raise StudyError(
                f"{key}.equation",
                f"michaelis_menten needs exactly one substrate, '{reaction.equation}' has {len(substrates)}",
                "write the enzyme on both sides, e.g. 'S + E -> P + E', or use rate_law: saturating",
            )
        ln_mean, ln_sd, dh_mean, dh_sd = van_t_hoff_prior(reaction.K_M, reaction.K_M_dH, energy, f"{key}.K_M_dH")
        return KernelTerms(1.0, (Site(substrates[0], -ln_mean, ln_sd, -dh_mean, dh_sd),))

    def check_terms(self, spec: ResolvedReaction, study_units: StudyUnits) -> list[str]:
        (site,) = spec.adsorption
        return [
            f"K_M ~ {lognormal_text(-site.ln_ref_mean, site.ln_ref_sd, study_units.concentration or '')}, "
            f"K_M_dH ~ {normal_text(-site.dh_mean, site.dh_sd, study_units.energy)}"
        ]

    def written_enthalpies(self, spec: ResolvedReaction) -> list[tuple[str, float, float]]:
        return [("K_M_dH", -site.dh_mean, site.dh_sd) for site in spec.adsorption]

    def derived_quantities(
        self,
        spec: ResolvedReaction,
        ln_k_ref: Draws,
        sites: Mapping[str, tuple[Draws, Draws]],
        study_units: StudyUnits,
    ) -> dict[str, tuple[str, Draws]]:
        ((ln_ref, dh),) = sites.values()
        conc, energy, time = study_units.concentration or "", study_units.energy, study_units.time
        # r = k c_S (...) / (1 + c_S / K_M) = (k K_M) c_S (...) / (K_M + c_S): k K_M is k_cat (per enzyme
        # concentration when the enzyme is in the equation) or V_max.
        with_enzyme = bool(catalysts(parse_equation(spec.equation or "")))
        turnover, unit = ("k_cat", f"1/{time}") if with_enzyme else ("V_max", f"{conc}/{time}")
        return {
            f"K_M[{spec.name}]": (conc, np.exp(-ln_ref)),
            f"K_M_dH[{spec.name}]": (energy, units.joule_per_mol_to(-dh, energy)),
            f"{turnover}[{spec.name}]": (unit, np.exp(ln_k_ref - ln_ref)),
        }
