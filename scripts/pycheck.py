"""Exits 0 when every Python package of scripts/requirements.txt imports."""
import importlib
import sys

missing = []
for mod in ["h5py", "numpy", "scipy", "meshio", "iapws", "SALib"]:
    try:
        importlib.import_module(mod)
    except Exception:  # noqa: BLE001 - any failure means the package is unusable
        missing.append(mod)
if missing:
    print("missing Python packages:", " ".join(missing))
    sys.exit(1)
