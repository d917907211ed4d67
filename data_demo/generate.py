"""Regenerate the demo data in this folder: ``python data_demo/generate.py``.

The scenario, its true parameters and its seed are stated in ``inference/demo.py`` (seed 20261201; true
Ea = 78 kJ/mol, k(65 degC) = 0.012 1/min, 8 % lognormal scatter). ``arrhenia demo`` writes the same files.
"""

from pathlib import Path

from inference.demo import write_demo

if __name__ == "__main__":
    study = write_demo(Path(__file__).resolve().parent)
    print(f"wrote {study} and its data")
