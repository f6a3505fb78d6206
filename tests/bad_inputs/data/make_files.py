"""Remake the bad measured-spectrum files listed in cases.toml (run from anywhere).

Each file holds one problem in an otherwise readable spectrum: 32 points of a
Lorentzian line on a uniform axis, 27Al at 9.4 T stated in the comments.
"""

from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
N = 32
HZ = np.linspace(-15500.0, 15500.0, N)           # 1000 Hz steps
PPM = np.linspace(150.0, -160.0, N)              # 10 ppm steps, descending as exported
Y = 1.0 / (1.0 + (HZ / 2000.0) ** 2)
HEAD = "# nucleus: 27Al\n# field_tesla: 9.4\n"


def rows(axis, values, sep=","):
    return [f"{a:.10g}{sep}{v:.10g}" for a, v in zip(axis, values)]


def write(name, text, mode="w"):
    p = HERE / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text, encoding="utf-8")


def main():
    good = rows(HZ, Y)
    write("binary.csv", (HEAD + "hz,intensity\n" + "\n".join(good[:8]) + "\n").encode() + b"\x00\x01\x02\xff" * 8)
    write("latin1.csv",
          ("# sample at 25 \u00b0C\n" + HEAD + "hz,intensity\n" + "\n".join(good) + "\n").encode("latin-1"))
    write("utf16.csv", (HEAD + "hz,intensity\n" + "\n".join(good) + "\n").encode("utf-16"))
    r = list(good)
    r[5] = r[5] + ",0.5"
    write("ragged.csv", HEAD + "hz,intensity\n" + "\n".join(r) + "\n")
    r = list(good)
    r[6] = r[6].split(",")[0] + ",abc"
    write("text_value.csv", HEAD + "hz,intensity\n" + "\n".join(r) + "\n")
    r = list(good)
    r[7] = r[7].split(",")[0] + ",nan"
    write("nan_value.csv", HEAD + "hz,intensity\n" + "\n".join(r) + "\n")
    r = rows(HZ, Y, "\t")
    r[8] = r[8].split("\t")[0] + "\tinf"
    write("inf_value.tsv", HEAD + "hz\tintensity\n" + "\n".join(r) + "\n")
    r = list(good)
    r[10], r[11] = r[11], r[10]
    write("non_monotonic.csv", HEAD + "hz,intensity\n" + "\n".join(r) + "\n")
    hz = HZ.copy()
    hz[12] += 300.0
    write("non_uniform.csv", HEAD + "hz,intensity\n" + "\n".join(rows(hz, Y)) + "\n")
    write("too_few_points.csv", HEAD + "hz,intensity\n" + "\n".join(good[:10]) + "\n")
    write("ppm_no_reference.csv", "# exported spectrum\nppm,intensity\n" + "\n".join(rows(PPM, Y)) + "\n")
    r = list(good)
    r[14] = r[13].split(",")[0] + "," + r[14].split(",")[1]
    write("duplicate_axis.csv", HEAD + "hz,intensity\n" + "\n".join(r) + "\n")
    write("unknown_column.csv", HEAD + "hz,counts\n" + "\n".join(good) + "\n")
    write("spectrum.xyz", HEAD + "hz,intensity\n" + "\n".join(good) + "\n")
    write("no_header.txt", HEAD + "\n".join(rows(HZ, Y, " ")) + "\n")
    write("only_comments.csv", HEAD + "# nothing was exported\n")
    write("decimal_comma.csv", HEAD + "hz;intensity\n"
          + "\n".join(f"{a:.1f};{v:.6f}".replace(".", ",") for a, v in zip(HZ, Y)) + "\n")
    write("imag_without_real.csv", HEAD + "hz,imag\n" + "\n".join(good) + "\n")
    write("other_nucleus.csv", "# nucleus: 23Na\n# field_tesla: 9.4\nhz,intensity\n" + "\n".join(good) + "\n")
    write("bad_nu_ref.csv", "# nu_ref_hz: -104.3e6\nhz,intensity\n" + "\n".join(good) + "\n")
    write("four_columns.dat", HEAD + "\n".join(f"{a:.10g} {v:.10g} 0 0" for a, v in zip(HZ, Y)) + "\n")
    write("duplicate_column.csv", HEAD + "hz,intensity,hz\n"
          + "\n".join(f"{g},{a:.10g}" for g, a in zip(good, HZ)) + "\n")

    ints = np.rint(Y * 1e6).astype(int)
    head = ("##TITLE= test line\n##JCAMP-DX= 5.01\n##DATA TYPE= {dtype}\n##DATA CLASS= XYDATA\n"
            "##ORIGIN= test\n##OWNER= test\n##.OBSERVE FREQUENCY= 104.3\n##.OBSERVE NUCLEUS= ^27Al\n"
            "##XUNITS= {xunits}\n##YUNITS= ARBITRARY UNITS\n##XFACTOR= 1\n##YFACTOR= 1e-6\n"
            "##FIRSTX= -15500\n##LASTX= 15500\n##NPOINTS= {npoints}\n##XYDATA= (X++(Y..Y))\n")
    body = "".join(f"{HZ[i]:.0f} " + " ".join(str(v) for v in ints[i:i + 8]) + "\n" for i in range(0, N, 8))
    write("jcamp_npoints.jdx", head.format(dtype="NMR SPECTRUM", xunits="HZ", npoints=N + 4) + body + "##END=\n")
    write("jcamp_fid.jdx", head.format(dtype="NMR FID", xunits="HZ", npoints=N) + body + "##END=\n")
    write("jcamp_xunits.jdx", head.format(dtype="NMR SPECTRUM", xunits="1/CM", npoints=N) + body + "##END=\n")
    write("jcamp_bad_digit.jdx", head.format(dtype="NMR SPECTRUM", xunits="HZ", npoints=N)
          + "-15500 @JJJ!K\n" + "##END=\n")
    write("jcamp_no_data.jdx", head.format(dtype="NMR SPECTRUM", xunits="HZ", npoints=N).replace(
        "##XYDATA= (X++(Y..Y))\n", "") + "##END=\n")

    np.save(HERE / "wrong_shape.npy", np.vstack([HZ, Y, Y, Y]).T.reshape(4, N))
    np.save(HERE / "no_axis_unit.npy", np.vstack([HZ, Y]))
    np.save(HERE / "text_array.npy", np.array([["a", "b"]] * N))

    d = HERE / "not_a_dataset"
    d.mkdir(exist_ok=True)
    (d / "notes.txt").write_text("a folder with notes, not a spectrum\n")
    d = HERE / "raw_only_experiment"
    d.mkdir(exist_ok=True)
    (d / "fid").write_bytes(np.zeros(64, dtype="<i4").tobytes())
    (d / "acqus").write_text("##TITLE= acquisition parameters\n##$NUC1= <27Al>\n##END=\n")


if __name__ == "__main__":
    main()
