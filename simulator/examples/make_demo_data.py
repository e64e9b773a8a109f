#!/usr/bin/python3
"""Write the demo data in this directory, deterministically.

The scenario is invented: Larkspur Dairy does not exist, and neither do its
lines, stations or measurements. The files are for demonstrations and
examples only; they say nothing about any real process.

Files written (next to this script):
  fill_weight_reference.csv  cup line B, filler head 4: 400 fills, in control
  fill_weight_recent.csv     the same head: 150 fills after a nozzle reseat
  capper_reference.csv       bottle line D, capper station 3: 200 bottles,
                             cap torque and label offset, before a reel change
  capper_recent.csv          the same station: 80 bottles after the change

Run with Debian's interpreter: /usr/bin/python3 make_demo_data.py
The output is a function of the seeds below and NumPy's generator streams.
NumPy keeps the right to change a distribution's stream between versions, so
another NumPy may write different numbers; the committed files are the
reference copy.
"""

import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20260402


def skewed(rng, size, mean, sd, shape):
    """Right-skewed values with the given mean and sd: a standardised gamma
    with shape k (skewness 2 / sqrt(k)), rescaled."""
    g = rng.gamma(shape, 1.0, size)
    return mean + sd * (g - shape) / np.sqrt(shape)


def quantise(x, step):
    """Round to the instrument's resolution (adding 0.0 turns -0.0 into 0.0)."""
    return np.round(np.asarray(x) / step) * step + 0.0


def write(name, comment, header, rows, decimals):
    path = os.path.join(HERE, name)
    with open(path, "w", encoding="ascii", newline="\n") as f:
        f.write("# " + comment + "\n")
        f.write(header + "\n")
        for row in rows:
            row = np.atleast_1d(row)
            f.write(",".join(f"{v:.{d}f}" for v, d in zip(row, decimals)) + "\n")
    print(f"wrote {path} ({len(rows)} rows)")


def main():
    rng = np.random.default_rng(SEED)

    # Fill weight in grams; the checkweigher reads to 0.1 g. Nominal 125.0 g.
    fill_scenario = ("Larkspur Dairy (invented), plant 2, cup line B, filler head 4: "
                     "fill weight in g, checkweigher resolution 0.1 g; {}. "
                     "Invented data for demos only.")
    reference = quantise(skewed(rng, 400, 125.0, 0.60, 16.0), 0.1)
    recent = quantise(skewed(rng, 150, 125.35, 0.68, 16.0), 0.1)
    write("fill_weight_reference.csv",
          fill_scenario.format("400 fills from an in-control day shift"),
          "fill_weight_g", reference, [1])
    write("fill_weight_recent.csv",
          fill_scenario.format("150 fills after nozzle 4 was reseated"),
          "fill_weight_g", recent, [1])

    # Capper station: cap application torque in N m (resolution 0.01) and
    # label offset from the seam in mm (resolution 0.1), mildly correlated
    # because a hard-seated cap nudges the bottle in the labeller's star
    # wheel. After the label reel change the offset moves by +0.3 mm; the
    # torque does not change.
    cov = np.array([[0.08**2, 0.2 * 0.08 * 0.5],
                    [0.2 * 0.08 * 0.5, 0.5**2]])
    cap_scenario = ("Larkspur Dairy (invented), plant 2, bottle line D, capper station 3: "
                    "cap torque in N m and label offset in mm; {}. "
                    "Invented data for demos only.")
    before = rng.multivariate_normal([2.20, 0.0], cov, 200)
    after = rng.multivariate_normal([2.20, 0.3], cov, 80)
    before = np.column_stack([quantise(before[:, 0], 0.01), quantise(before[:, 1], 0.1)])
    after = np.column_stack([quantise(after[:, 0], 0.01), quantise(after[:, 1], 0.1)])
    write("capper_reference.csv",
          cap_scenario.format("200 bottles before the label reel change"),
          "cap_torque_nm,label_offset_mm", before, [2, 1])
    write("capper_recent.csv",
          cap_scenario.format("80 bottles after the label reel change"),
          "cap_torque_nm,label_offset_mm", after, [2, 1])


if __name__ == "__main__":
    main()
