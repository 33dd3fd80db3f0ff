"""Write the bundled demo table ``demo/greenhouse.csv`` (invented data, fixed seed).

Usage: python demo/make_greenhouse.py
"""

from pathlib import Path

from selectkit.demo import make_greenhouse

if __name__ == "__main__":
    target = Path(__file__).resolve().parent / "greenhouse.csv"
    make_greenhouse().to_csv(target, index=False, lineterminator="\n")
    print(f"wrote {target}")
