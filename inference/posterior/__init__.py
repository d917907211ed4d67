"""What a posterior says, as tables and plain arrays: draws, the convergence and misfit verdict, derived
quantities, model comparison and calibration statistics (ArviZ, xarray, scipy).

May import ``inputs`` and ``physics``; never ``model`` (a saved posterior is read without PyMC).
"""
