"""Units-free numerics of kinetics: Arrhenius and van 't Hoff laws, networks, rate kernels, integrators, closed
forms and reactors.

Depends on numpy, scipy and numba only, and on no other part of Arrhenia (except ``errors`` and ``processes``):
it takes plain numbers and arrays (K, J/mol; times and concentrations in the study's units), so it can be tested
against handbooks and scipy on its own and reused on posterior draws.
"""
