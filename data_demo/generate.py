"""Regenerate the demo data in this folder: ``python data_demo/generate.py``.

The invented scenarios, their true parameters and seeds are stated in ``inference/demo.py``: the network
A + B -> C, C -> D (seed 20261202), the ring-closure rate constants (seed 20261201; true Ea = 78 kJ/mol,
k(65 degC) = 0.012 1/min) and the saturating conversion on three catalyst lots (seed 20261203).
``arrhenia demo`` writes the same files.
"""

from pathlib import Path

from inference.workflows.demo import write_demo

if __name__ == "__main__":
    study = write_demo(Path(__file__).resolve().parent, replace=True)
    print(f"wrote {study} and the other demo studies with their data")
