"""Write the files of the first-use bad-input cases (cases.toml): each holds one problem.

    python tests/bad_inputs/first_use/make_files.py

Every spectrum here is SYNTHETIC (invented numbers: a Gaussian 31P line at 9.4 T), not a measurement.
"""

from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
NU_REF_HZ = 162015384.535488  # 31P at 9.4 T (the nuclide table's value)


def text(name, body, encoding="utf-8"):
    (HERE / name).write_text(body, encoding=encoding)


ppm = np.linspace(20.0, -20.0, 64)
rng = np.random.default_rng(11)
line = np.exp(-0.5 * ((ppm - 2.0) / 1.5) ** 2) + rng.normal(0.0, 0.01, ppm.size)


def csv(rows, header="ppm,intensity", keys=""):
    return keys + header + "\n" + "".join(f"{a},{b}\n" for a, b in rows)


good_rows = [(f"{a:.6f}", f"{b:.6e}") for a, b in zip(ppm, line)]
text("line.csv", csv(good_rows, keys="# SYNTHETIC test spectrum; not a measurement\n# nucleus: 31P\n"
                     "# field_tesla: 9.4\n"))
MODEL = """nucleus = "31P"

[measurement]
field_tesla = 9.4

[[site]]
label = "P"
shift_ppm = { start = 0.0, min = -10.0, max = 10.0 }
gauss_hz = { start = 300.0, min = 10.0, max = 3000.0 }
"""
text("fit.toml", "# a valid fit model; each case breaks one thing\n" + MODEL)
text("sim.toml", MODEL.replace("{ start = 0.0, min = -10.0, max = 10.0 }", "0.0")
     .replace("{ start = 300.0, min = 10.0, max = 3000.0 }", "300.0")
     .replace("field_tesla = 9.4", "field_tesla = 9.4\npoints = 256\norientations = 8"))

# class 1: hostile input
text("deep.toml", 'nucleus = "31P"\n[measurement]\nfield_tesla = 9.4\n[[site]]\nlabel = "P"\nnote = '
     + "[" * 3000 + "]" * 3000 + "\n")
text("model_overflow.toml", MODEL.replace("field_tesla = 9.4", "field_tesla = 1e309"))
text("rotors_deep.toml", "x = " + "{ a = " * 500 + "1" + " }" * 500 + "\n")
rows = list(good_rows)
rows[9] = ("1e309", rows[9][1])
text("axis_overflow.csv", csv(rows))
rows = list(good_rows)
rows[20] = (rows[20][0], "-1e400")
text("intensity_overflow.csv", csv(rows))
text("header_overflow.csv", csv(good_rows, keys="# field_tesla: 1e309\n"))
text("jcamp_overflow.jdx", "##TITLE=synthetic\n##JCAMP-DX=5.01\n##DATA TYPE=NMR SPECTRUM\n##XUNITS=PPM\n"
     "##YUNITS=ARBITRARY UNITS\n##FIRSTX=1e309\n##LASTX=-20\n##NPOINTS=4\n##XYDATA=(X++(Y..Y))\n"
     "20 1 2 3 4\n##END=\n")

# class 2: data that cannot support a result
text("constant.csv", csv([(f"{a:.6f}", "1.0") for a in ppm]))
text("noise.csv", csv([(f"{a:.6f}", f"{b:.6e}") for a, b in zip(ppm, rng.normal(0.0, 1.0, ppm.size))]))
text("other_field.csv", csv(good_rows, keys="# nucleus: 31P\n# field_tesla: 14.1\n"))
text("other_nucleus.csv", csv(good_rows, keys="# nucleus: 23Na\n"))
text("span_alone.toml", 'nucleus = "31P"\n[measurement]\nfield_tesla = 9.4\n[[site]]\nlabel = "P"\n'
     "span_ppm = 120.0\n")

# class 4: files as they are exported
far = ppm + 3000.0  # a headerless file whose axis puts the data on the model's lines in no unit
text("headerless_far.txt", "".join(f"{a:.6f}\t{b:.6e}\n" for a, b in zip(far, line)))
text("headerless_text.txt", "".join(f"{a:.6f}\t{'n/a' if k == 5 else f'{b:.6e}'}\n"
                                    for k, (a, b) in enumerate(zip(ppm, line))))
text("bom_bad_value.toml", "\ufeff" + MODEL.replace("field_tesla = 9.4", "field_tesla = -9.4"))
points = "".join(f"{a:.6f}, {b:.6e}\n" for a, b in zip(ppm, line))
head = ("##TITLE=synthetic\n##JCAMP-DX=5.01\n##DATA TYPE=NMR SPECTRUM\n##XUNITS=PPM\n##YUNITS=ARBITRARY UNITS\n"
        "##.OBSERVE FREQUENCY=162.015384535488\n##.OBSERVE NUCLEUS=^31P\n##NPOINTS=64\n##XYPOINTS=(XY..XY)\n")
text("points_odd.jdx", head + points.replace("2.000000e-", "", 0) + "3.5\n##END=\n")
text("points_text.jdx", head + points.replace(f"{ppm[7]:.6f}, ", "abc, ", 1) + "##END=\n")
text("points_no_units.jdx", head.replace("##XUNITS=PPM\n", "") + points + "##END=\n")
text("points_other_nucleus.jdx", head.replace("^31P", "^27Al").replace("162.015384535488", "104.2")
     + points + "##END=\n")

# class 8: a field that looks like a proton frequency
text("field_400.toml", MODEL.replace("field_tesla = 9.4", "field_tesla = 400"))
text("field_600_list.toml", MODEL.replace("[measurement]\nfield_tesla = 9.4", "[[measurement]]\nfield_tesla = 600"))
text("afile", "not a folder\n")
