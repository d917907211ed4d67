"""Regenerate the demo data in this folder: ``python data_demo/generate.py``.

The invented scenarios, their true parameters and seeds are stated in ``inference/workflows/demo.py``: the
network A + B -> C, C -> D (seed 20261202), the ring-closure rate constants (seed 20261201; true Ea = 78 kJ/mol,
k(65 degC) = 0.012 1/min), the saturating conversion on three catalyst lots (seed 20261203) and the dosed
coupling A + B -> P with its impurity P -> I, B dosed during the heat-up (seed 20261211; dosed_*.csv, simulated
with Arrhenia's compiled solver under each run's temperature log and pump programme), and the isomerisation
A -> P -> I followed as HPLC area % with a reporting limit (seed 20261213; area_*.csv).
``arrhenia demo`` writes the same files.
"""

from pathlib import Path

from inference.workflows.demo import write_demo

if __name__ == "__main__":
    study = write_demo(Path(__file__).resolve().parent, replace=True)
    print(f"wrote {study} and the other demo studies with their data")
