"""The only place that imports PyMC or PyTensor: random variables from a study's parameter blocks, the PyTensor Op
over the integrators, and sampling.

May import ``inputs`` and ``physics``.
"""
