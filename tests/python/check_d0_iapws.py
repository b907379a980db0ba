"""Stokes-Einstein D0 of the engine against water viscosity from the iapws package.

Usage: python3 check_d0_iapws.py RADIUS_NM D0_M2_PER_S DEFAULT_VISCOSITY_MPA_S

The viscosity of water at 37 C and 1 atm is computed by iapws (IAPWS 2008 formulation of the
viscosity of ordinary water substance, through the IAPWS-95 equation of state for the density);
D0 = kB T / (6 pi mu r) with the exact SI 2019 kB. Checks that the engine's default viscosity is
that of water to 1e-4, and that its D0 agrees to 1e-4.
"""
import math
import sys

from iapws import IAPWS95

r_nm, d0_engine, mu_default_mpas = (float(a) for a in sys.argv[1:4])
T = 310.15
mu = IAPWS95(T=T, P=0.101325).mu  # Pa s
kB = 1.380649e-23
d0 = kB * T / (6 * math.pi * mu * r_nm * 1e-9)
ok = True
if abs(mu_default_mpas * 1e-3 / mu - 1) > 1e-4:
    print(f"default viscosity {mu_default_mpas} mPa s differs from IAPWS {mu * 1e3:.6f} mPa s")
    ok = False
if abs(d0_engine / d0 - 1) > 1e-4:
    print(f"engine D0 {d0_engine:e} differs from {d0:e}")
    ok = False
print(f"check_d0_iapws: mu(37 C) = {mu * 1e3:.6f} mPa s, D0({r_nm} nm) = {d0:.6e} m2/s, engine {d0_engine:.6e}")
sys.exit(0 if ok else 1)
