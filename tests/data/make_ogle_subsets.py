"""Regenerate the OGLE-IV subsets shipped under tests/data/ from ../shared/data/ (run from the repo root).

Source: Soszyński, I., et al. 2015, Acta Astronomica 65, 297, "The OGLE Collection of Variable Stars.
Over 9000 Classical Cepheids in the Magellanic System" (OGLE-IV Collection of Variable Stars).
Kept: fundamental-mode (mode F) Cepheids with both V and I mean magnitudes, in the contract of
docs/data-contract.md. The catalogue gives no per-star errors; its mean magnitudes are good to
about 0.01-0.02 mag, so 0.02 mag is assigned to every magnitude (an assumption stated in the table).
"""

import sys
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

SOURCE = ("Soszynski, I., et al. 2015, Acta Astronomica 65, 297 (OGLE-IV Collection of Variable Stars): "
          "classical Cepheids in the Magellanic System")
ASSUMED_ERR = 0.02


def subset(src: Path, galaxy: str) -> Table:
    t = Table.read(src, format="ascii.csv")
    keep = (t["mode"] == "F") & ~np.ma.getmaskarray(t["V"]) & ~np.ma.getmaskarray(t["I"])
    t = t[keep]
    out = Table()
    out["star"] = t["id"]
    out["host"] = [galaxy] * len(t)
    out["period"] = np.asarray(t["period"], float) * u.day
    for b in ("I", "V"):
        out[f"mag_{b}"] = np.asarray(t[b], float) * u.mag
        out[f"mag_{b}_err"] = np.full(len(t), ASSUMED_ERR) * u.mag
    out.meta["source"] = SOURCE
    out.meta["selection"] = "mode F with both V and I; errors 0.02 mag assumed (catalogue gives none)"
    return out


if __name__ == "__main__":
    shared = Path(sys.argv[1] if len(sys.argv) > 1 else "../shared/data")
    here = Path(__file__).parent
    for name, galaxy in (("lmc", "LMC"), ("smc", "SMC")):
        subset(shared / f"ogle4_{name}_cepheids.csv", galaxy).write(
            here / f"ogle4_{name}_fundamental.ecsv", format="ascii.ecsv", overwrite=True)
