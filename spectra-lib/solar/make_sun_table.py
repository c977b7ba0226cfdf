#!/usr/bin/env python3
"""Writes spectra-lib/solar/sun-1au.spectrum: the solar spectral irradiance at 1 AU that
thiomap weights band responses with.

0.28-4.00 um: the ASTM G173-03 extraterrestrial column exactly as tabulated (its own
wavelength grid: 0.5 nm steps to 400 nm, 1 nm to 1700 nm, 5 nm to 4000 nm), read from
the copy pvlib distributes (pvlib.spectrum.get_reference_spectra; pvlib is BSD-3-Clause).

4.01-5.20 um: a model, because the table ends at 4 um: a 5778 K Planck curve seen from
1 AU, pi B(lambda, T) (R_sun / 1 AU)^2 with R_sun = 695,700 km (IAU 2015 nominal solar
radius) and 1 AU = 149,597,870.7 km (IAU 2012), scaled by one factor so that it meets the
table's mean over 3.80-4.00 um. Near 4-5 um the Sun's brightness temperature lies close
to its effective temperature (from memory), so the splice's shape error is small beside
the scale it is matched to.

Run: python3 -m pip install pvlib==0.16.1 && python3 spectra-lib/solar/make_sun_table.py
"""
import math
import pathlib

import numpy as np
import pvlib

H = 6.62607015e-34  # J s (SI 2019, exact)
C = 2.99792458e8  # m/s (exact)
K = 1.380649e-23  # J/K (SI 2019, exact)
R_SUN = 6.957e8  # m
AU = 1.495978707e11  # m
T_SUN = 5778.0  # K


def planck_1au_per_um(wl_um):
    lam = wl_um * 1e-6
    b = 2 * H * C * C / lam**5 / np.expm1(H * C / (lam * K * T_SUN))  # W m^-3 sr^-1
    return math.pi * b * (R_SUN / AU) ** 2 * 1e-6  # W m^-2 um^-1


def main():
    ref = pvlib.spectrum.get_reference_spectra()
    wl_nm = ref.index.to_numpy(dtype=float)
    etr = ref["extraterrestrial"].to_numpy(dtype=float)  # W m^-2 nm^-1
    wl_um = wl_nm / 1000.0
    per_um = etr * 1000.0
    tail = (wl_nm >= 3800.0) & (wl_nm <= 4000.0)
    scale = float(np.mean(per_um[tail] / planck_1au_per_um(wl_um[tail])))
    ext_um = np.round(np.arange(4.01, 5.2001, 0.01), 2)
    ext = scale * planck_1au_per_um(ext_um)
    out = pathlib.Path(__file__).with_name("sun-1au.spectrum")
    lines = [
        'id = "sun-1au"',
        'name = "solar spectral irradiance at 1 AU"',
        'units = "W m-2 um-1"',
        'licence = "ASTM G173-03 values as redistributed with pvlib 0.16.1 (BSD-3-Clause); splice: thiomap, MIT OR Apache-2.0"',
        "",
        "[table]",
        'source = "ASTM G173-03 extraterrestrial column (derived from SMARTS v2.9.2), read from pvlib 0.16.1"',
        "from_um = 0.28",
        "to_um = 4.0",
        "",
        "[splice]",
        f'model = "Planck {T_SUN:.0f} K seen from 1 AU (R_sun 695700 km, IAU 2015), times {scale:.4f} to meet the table mean over 3.80-4.00 um"',
        "from_um = 4.01",
        "to_um = 5.2",
        f"scale = {scale:.6f}",
        "",
        "--- samples: wavelength_um irradiance_w_m2_um ---",
    ]
    lines += [f"{w:.4f} {v:.6g}" for w, v in zip(wl_um, per_um)]
    lines += [f"{w:.4f} {v:.6g}" for w, v in zip(ext_um, ext)]
    out.write_text("\n".join(lines) + "\n")
    print(f"wrote {out}: {len(wl_um) + len(ext_um)} samples, splice scale {scale:.4f}")


if __name__ == "__main__":
    main()
