"""Regenerate the SIMULATED demo data in this folder (seeded: the same files every time).

python data_demo/make_demo.py
"""

from pathlib import Path

from allobranch.demo import DEMO_SEED, write_demo

if __name__ == "__main__":
    paths = write_demo(Path(__file__).resolve().parent, seed=DEMO_SEED)
    for kind, path in paths.items():
        print(f"{kind}: {path}")
