"""Write configs/wave-profile.csv: an invented two-lobed burst, as a waveform computed elsewhere would come.

    python examples/make_wave_profile.py

The profile is h+ = A (1 - 2u^2) exp(-u^2), hx = A u exp(-u^2) / 2 with u = (t - t0) / w: a shape with
no closed-form residual in ptares, so `configs/waves.toml` injects it through the table route.  One
sample every 5 days keeps the estimated interpolation error far below the residuals.
"""

from pathlib import Path

import numpy as np

AMPLITUDE = 6e-14
CENTRE_MJD = 55800.0
WIDTH_DAYS = 90.0


def main() -> None:
    mjd = np.arange(CENTRE_MJD - 12 * WIDTH_DAYS, CENTRE_MJD + 12 * WIDTH_DAYS + 1.0, 5.0)
    u = (mjd - CENTRE_MJD) / WIDTH_DAYS
    envelope = AMPLITUDE * np.exp(-u * u)
    rows = ["mjd,plus,cross"] + [f"{m:.1f},{p:.6e},{c:.6e}" for m, p, c in zip(mjd, (1 - 2 * u * u) * envelope, 0.5 * u * envelope)]
    path = Path(__file__).resolve().parent.parent / "configs" / "wave-profile.csv"
    path.write_text("\n".join(rows) + "\n")
    print(f"wrote {path} ({len(mjd)} rows)")


if __name__ == "__main__":
    main()
