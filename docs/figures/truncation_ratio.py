"""Make docs/figures/truncation_ratio.png: where the plain level sum and the
occupation-weighted one part, for a solar mixture.

    python docs/figures/truncation_ratio.py
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from sahaboltz.data.composition import solar  # noqa: E402
from sahaboltz.data.database import default_database  # noqa: E402
from sahaboltz.equilibrium import solve_equilibrium  # noqa: E402
from sahaboltz.kernels.partition import PartitionModel  # noqa: E402

SPECIES = ("H I", "Na I", "Mg I", "Ca I", "Fe I", "Fe II", "He I")


def main() -> None:
    db = default_database()
    sps = [db.species(n) for n in SPECIES]
    plain, occ = PartitionModel(sps, "plain"), PartitionModel(sps, "occupation")
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4.2), constrained_layout=True)
    t = np.linspace(4000.0, 16000.0, 121)
    for p_gas, style in ((1e3, ":"), (1e5, "-")):
        ne = solve_equilibrium(solar(), t, gas_pressure=p_gas).n_e
        ratio = plain.evaluate(t) / occ.evaluate(t, n_e=ne)
        for k, name in enumerate(SPECIES):
            ax1.plot(t, ratio[k], style, color=f"C{k}",
                     label=name if p_gas == 1e5 else None)
    ax1.axhline(1.10, color="k", lw=0.6, ls="--")
    ax1.set(xlabel="T [K]", ylabel="U plain / U occupation",
            title="solar mixture, P_gas = 1e5 (solid), 1e3 (dotted) dyn cm$^{-2}$")
    ax1.legend(fontsize=8, ncol=2)
    ne = np.geomspace(1e8, 1e20, 121)
    ratio = plain.evaluate(1e4)[:, None] / occ.evaluate(1e4, n_e=ne)
    for k, name in enumerate(SPECIES):
        ax2.plot(ne, ratio[k], color=f"C{k}", label=name)
    ax2.axhline(1.10, color="k", lw=0.6, ls="--")
    ax2.set(xlabel="n_e [cm$^{-3}$]", ylabel="U plain / U occupation", xscale="log",
            title="T = 10,000 K")
    out = Path(__file__).with_suffix(".png")
    fig.savefig(out, dpi=110)
    print(out)


if __name__ == "__main__":
    main()
