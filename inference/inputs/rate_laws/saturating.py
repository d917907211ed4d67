"""Saturating law (Langmuir-Hinshelwood, Hougen-Watson): r = k prod c_i^a_i / (1 + sum_j K_j c_j)^n."""

from __future__ import annotations

import difflib
from collections.abc import Mapping

import numpy as np

from ...errors import StudyError
from ...physics.network import Equation
from .. import units
from .law import (
    Draws,
    KernelTerms,
    RateLaw,
    ResolvedReaction,
    Site,
    StudyUnits,
    ValidatedReaction,
    lognormal_text,
    normal_text,
    van_t_hoff_prior,
)


class Saturating(RateLaw):
    """One adsorption constant K_j per species under ``adsorption`` (K_ref in 1/concentration, dH by van 't
    Hoff) and the denominator power ``inhibition_exponent`` (default 1)."""

    name = "saturating"
    description = "r = k prod c_i^a_i / (1 + sum_j K_j c_j)^n, K_j by van 't Hoff (Langmuir-Hinshelwood, Hougen-Watson)"
    takes = frozenset({"orders", "adsorption", "inhibition_exponent"})
    requires = frozenset({"adsorption"})
    network_only = True

    def kernel_terms(
        self, reaction: ValidatedReaction, equation: Equation, species: tuple[str, ...], energy: str, key: str
    ) -> KernelTerms:
        sites = []
        for name, prior in reaction.adsorption.items():
            if name not in species:
                close = difflib.get_close_matches(name, species, n=1)
                hint = f"did you mean '{close[0]}'?" if close else "adsorbing species must be in the species list"
                raise StudyError(f"{key}.adsorption.{name}", f"'{name}' is not in species ({', '.join(species)})", hint)
            where = f"{key}.adsorption.{name}.dH"
            sites.append(Site(name, *van_t_hoff_prior(prior.K_ref, prior.dH, energy, where)))
        return KernelTerms(reaction.inhibition_exponent or 1.0, tuple(sites))

    def check_terms(self, spec: ResolvedReaction, study_units: StudyUnits) -> list[str]:
        energy = study_units.energy
        terms = [
            f"K_{site.species} ~ {lognormal_text(site.ln_ref_mean, site.ln_ref_sd, f'per {study_units.concentration}')}"
            f", dH_ads ~ {normal_text(site.dh_mean, site.dh_sd, energy)}"
            for site in spec.adsorption
        ]
        return [*terms, f"denominator power {spec.inhibition_exponent:g}"]

    def written_enthalpies(self, spec: ResolvedReaction) -> list[tuple[str, float, float]]:
        return [(f"adsorption.{site.species}.dH", site.dh_mean, site.dh_sd) for site in spec.adsorption]

    def derived_quantities(
        self,
        spec: ResolvedReaction,
        ln_k_ref: Draws,
        sites: Mapping[str, tuple[Draws, Draws]],
        study_units: StudyUnits,
    ) -> dict[str, tuple[str, Draws]]:
        out: dict[str, tuple[str, Draws]] = {}
        for species, (ln_ref, dh) in sites.items():
            label = f"{spec.name}:{species}"
            out[f"K_ads_ref[{label}]"] = (f"1/({study_units.concentration or ''})", np.exp(ln_ref))
            out[f"dH_ads[{label}]"] = (study_units.energy, units.joule_per_mol_to(dh, study_units.energy))
        return out
