"""Regenerate ``compquant/data/atomic/elements.csv`` (Z = 1..92) from mendeleev.

Run from the worktree root::

    /work/venv/bin/python -m compquant.atomic._make_elements

mendeleev (the ``elements`` and ``ionizationenergies`` tables of its bundled
database) is a test-time dependency only: a per-element lookup costs about
0.25 s, so the package ships the generated table and the tests compare it with
mendeleev again (and the masses with periodictable).

Mass: standard atomic weight (u) as given by mendeleev (IUPAC values; for
elements without a standard atomic weight, mendeleev's value for the most
stable isotope).  ie1_ev / ie2_ev: first and second ionisation energies (eV),
mendeleev's NIST-derived values (experimental where available).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

OUT = Path(__file__).resolve().parents[1] / "data" / "atomic" / "elements.csv"


def build_rows() -> list[dict]:
    """Return one dict per element Z = 1..92 from mendeleev's database."""
    from mendeleev.fetch import fetch_table

    el = fetch_table("elements").set_index("atomic_number")
    ie = fetch_table("ionizationenergies")
    # prefer experimental (non-theoretical) rows when both exist
    ie = ie.sort_values(["atomic_number", "ion_charge", "is_theoretical"])
    ie = ie.drop_duplicates(["atomic_number", "ion_charge"], keep="first")
    ie = ie.set_index(["atomic_number", "ion_charge"])["ionization_energy"]
    rows = []
    for z in range(1, 93):
        ie1 = ie.get((z, 0))
        ie2 = ie.get((z, 1))
        rows.append(
            {
                "Z": z,
                "symbol": el.loc[z, "symbol"],
                "name": el.loc[z, "name"],
                "mass_u": f"{float(el.loc[z, 'atomic_weight']):.9g}",
                "ie1_ev": f"{float(ie1):.6f}" if ie1 is not None else "",
                "ie2_ev": f"{float(ie2):.6f}" if ie2 is not None and z > 1 else "",
                "source": "mendeleev 1.3 database (IUPAC atomic weights; NIST ionisation energies)",
            }
        )
    return rows


def main() -> None:
    from compquant.fileio import write_text_atomic

    rows = build_rows()
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
    w.writeheader()
    w.writerows(rows)
    write_text_atomic(OUT, buf.getvalue())
    print(f"wrote {OUT} ({len(rows)} elements)")


if __name__ == "__main__":
    main()
