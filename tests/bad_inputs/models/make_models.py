"""Write the bad model files of this folder and their manifest (cases.toml).

Each case is one problem in an otherwise valid model (or one bad command-line
argument with a valid model), paired with the words its one-line error must
contain.  Run ``python tests/bad_inputs/models/make_models.py`` after editing
the list; the files are committed so that the test reads them as a user's
files.
"""

from __future__ import annotations

from pathlib import Path

HERE = Path(__file__).resolve().parent

BASE_MEAS = 'field_tesla = 9.4\npoints = 256\norientations = 8\n'
BASE_SITE = 'label = "A"\nshift_ppm = 60.0\ncq_mhz = 3.0\neta_q = 0.3\n'


def model(meas=BASE_MEAS, site=BASE_SITE, nucleus='"27Al"', extra="", sites=None):
    text = f"nucleus = {nucleus}\n\n[measurement]\n{meas}\n"
    for s in (sites if sites is not None else [site]):
        text += f"[[site]]\n{s}\n"
    return text + extra


def m(extra_meas):
    return model(meas=BASE_MEAS + extra_meas + "\n")


def s(extra_site):
    return model(site=BASE_SITE + extra_site + "\n")


# (file name, content (str or bytes), extra command-line arguments, words the error must contain)
CASES = [
    # --- files
    ("binary.toml", b"nucleus = \x00\x01\x02 binary", [], ["binary", "binary.toml"]),
    ("latin1.toml", "nucleus = \"27Al\"\n# caf\xe9\n".encode("latin-1"), [], ["not UTF-8", "latin1.toml"]),
    ("empty.toml", "", [], ["empty", "empty.toml"]),
    ("bad_syntax.toml", "nucleus = \n", [], ["not valid TOML", "bad_syntax.toml"]),
    # --- top level
    ("no_nucleus.toml", model().replace('nucleus = "27Al"\n', ""), [], ["nucleus", "required"]),
    ("unknown_nucleus.toml", model(nucleus='"27Ag"'), [], ["27Ag", "did you mean"]),
    ("nucleus_number.toml", model(nucleus="27"), [], ["nucleus", "text"]),
    ("unknown_top_key.toml", model() + 'temperature = 300\n', [], ["unknown key", "temperature"]),
    ("no_measurement.toml", 'nucleus = "27Al"\n[[site]]\ncq_mhz = 3.0\n', [], ["field_tesla", "required"]),
    ("no_field.toml", model(meas="points = 256\n"), [], ["field_tesla", "required"]),
    ("no_sites.toml", 'nucleus = "27Al"\n[measurement]\nfield_tesla = 9.4\n', [], ["[[site]]"]),
    ("site_not_table.toml", 'nucleus = "27Al"\nsite = 3\n[measurement]\nfield_tesla = 9.4\n', [], ["site"]),
    # --- measurement
    ("field_zero.toml", model(meas="field_tesla = 0\n"), [], ["field_tesla = 0", "allowed range"]),
    ("field_huge.toml", model(meas="field_tesla = 100\n"), [], ["field_tesla = 100", "allowed range"]),
    ("field_text.toml", model(meas='field_tesla = "9.4"\n'), [], ["field_tesla", "must be a number"]),
    ("spin_negative.toml", m("spinning_hz = -5"), [], ["spinning_hz = -5", "allowed range"]),
    ("spin_beyond_rotors.toml", m("spinning_hz = 1e9"), [], ["spinning_hz", "allowed range", "rotors"]),
    ("spin_tiny.toml", m("spinning_hz = 5"), [], ["spinning_hz", "below 10 Hz"]),
    ("spin_word.toml", m('spinning_hz = "fast"'), [], ["spinning_hz", "inf"]),
    ("rotor_angle.toml", m("rotor_angle_deg = 95"), [], ["rotor_angle_deg = 95", "[0, 90]"]),
    ("transitions_empty.toml", m("transitions = []"), [], ["transitions", "selects nothing"]),
    ("pulse_without_sequence.toml", m("pulse_us = 2.0\nrf_khz = 50.0"), [],
     ["pulse_us", "rf_khz", "pulse_sequence"]),
    ("pulse_without_rf.toml", m('pulse_sequence = "single"\npulse_us = 2.0'), [], ["pulse_sequence", "rf_khz"]),
    ("pulse_too_long.toml", m('pulse_sequence = "echo"\npulse_us = 5000.0\nrf_khz = 50.0'), [],
     ["pulse_us = 5000", "(0, 1000]"]),
    ("pulse_distributed.toml", model(meas=BASE_MEAS + 'pulse_sequence = "single"\npulse_us = 1.0\nrf_khz = 50.0\n'
                                     + 'carrier_ppm = 30.0\n', site='label = "A"\nczjzek_sigma_mhz = 2.0\n'), [],
     ["site 'A'", "finite-pulse", "carrier_ppm"]),
    ("echo_train_echoes.toml", m("echo_train_period_us = 200.0\necho_train_echoes = 0"), [],
     ["echo_train_echoes = 0", "[1, 100000]"]),
    ("transitions_word.toml", m('transitions = "middle"'), [], ["transition", "m1:m2"]),
    ("transitions_too_high.toml", m('transitions = ["7/2:5/2"]'), [], ["7/2:5/2", "|m| <= I"]),
    ("transitions_double.toml", m('transitions = ["3/2:-1/2"]'), [], ["3/2:-1/2", "single-quantum"]),
    ("transitions_mq.toml", m('transitions = ["3/2:-3/2"]'), [], ["3/2:-3/2", "multiple-quantum"]),
    ("central_integer_spin.toml", model(nucleus='"2H"', site='label = "D"\ncq_mhz = 0.17\n'), [],
     ["central", "spin 1", "all"]),
    ("method.toml", m('method = "magic"'), [], ["method = 'magic'", "perturbation"]),
    ("points_small.toml", model(meas="field_tesla = 9.4\npoints = 10\n"), [], ["points = 10", "[16"]),
    ("points_fraction.toml", model(meas="field_tesla = 9.4\npoints = 2048.5\n"), [], ["points = 2048.5", "integer"]),
    ("points_huge.toml", model(meas="field_tesla = 9.4\npoints = 10000000\n"), [], ["points = 10000000", "integer"]),
    ("center_far.toml", m("center_ppm = 1e9"), [], ["center_ppm", "allowed range"]),
    ("width_zero.toml", m("center_ppm = 0.0\nwidth_ppm = 0"), [], ["width_ppm = 0", "allowed range"]),
    ("width_tiny.toml", m("center_ppm = 0.0\nwidth_ppm = 1e-9"), [], ["width_ppm", "per point", "at least"]),
    ("orientations_zero.toml", model(meas="field_tesla = 9.4\norientations = 0\n"), [],
     ["orientations = 0", "[1, 1024]"]),
    ("orientations_word.toml", model(meas='field_tesla = 9.4\norientations = "nonsense"\n'), [],
     ["orientations", "nonsense"]),
    ("orientations_size.toml", model(meas='field_tesla = 9.4\norientations = "zcw-octant-1000"\n'), [],
     ["orientations", "zcw-octant-1000"]),
    ("orientations_float.toml", model(meas="field_tesla = 9.4\norientations = 2.5\n"), [],
     ["orientations = 2.5", "whole number"]),
    ("orientations_no_triangles.toml", model(meas='field_tesla = 9.4\norientations = "zcw-octant-1597"\n'), [],
     ["zcw-octant-1597", "triangles", "histogram"]),
    ("binning.toml", m('binning = "smooth"'), [], ["binning = 'smooth'", "interpolate"]),
    ("rotor_phases_48.toml", m("spinning_hz = 5000\nrotor_phases = 48"), [], ["rotor_phases = 48", "power of 2"]),
    ("rotor_phases_8.toml", m("spinning_hz = 5000\nrotor_phases = 8"), [], ["rotor_phases = 8", "16"]),
    ("lorentz_huge.toml", m("lorentz_hz = 1e12"), [], ["lorentz_hz", "allowed range"]),
    ("gauss_negative.toml", m("gauss_hz = -1"), [], ["gauss_hz = -1", "allowed range"]),
    ("broadening_wider_than_axis.toml", m("center_ppm = 0.0\nwidth_ppm = 10.0\nlorentz_hz = 100000"), [],
     ["broadening", "wider than the axis", "width_ppm"]),
    ("offset_huge.toml", m("shift_offset_ppm = 1e6"), [], ["shift_offset_ppm", "allowed range"]),
    ("measurement_typo.toml", m("feild_tesla = 9.4"), [], ["feild_tesla", "did you mean 'field_tesla'"]),
    ("spin_free.toml", m("spinning_hz = { start = 5000.0 }"), [], ["spinning_hz", "cannot be a fit parameter"]),
    ("data_not_text.toml", m("data = 3"), [], ["data", "path"]),
    # --- sites
    ("duplicate_labels.toml", model(sites=[BASE_SITE, BASE_SITE]), [], ["'A'", "unique"]),
    ("weights_zero.toml", model(sites=[BASE_SITE + "weight = 0\n", 'label = "B"\nweight = 0.0\n']), [],
     ["weight = 0", "at least one"]),
    ("weight_negative.toml", s("weight = -1"), [], ["weight = -1", "allowed range"]),
    ("eta_q_big.toml", s("eta_q = 1.5").replace("eta_q = 0.3\n", ""), [], ["eta_q = 1.5", "[0, 1]"]),
    ("cq_huge.toml", s("cq_mhz = 2000").replace("cq_mhz = 3.0\n", ""), [], ["cq_mhz = 2000", "allowed range"]),
    ("cq_spin_half.toml", model(nucleus='"31P"'), [], ["cq_mhz", "spin 1/2"]),
    ("cq_strong_coupling.toml", s("cq_mhz = 500").replace("cq_mhz = 3.0\n", ""), [],
     ["site 'A'", "nu_Q", "allow-strong-coupling"]),
    ("span_negative.toml", s("span_ppm = -10\nskew = 0.0"), [], ["span_ppm = -10", "allowed range"]),
    ("skew_big.toml", s("span_ppm = 10\nskew = 3"), [], ["skew = 3", "[-1, 1]"]),
    ("skew_alone.toml", s("skew = 0.5"), [], ["skew", "span_ppm"]),
    ("two_shift_forms.toml", s("span_ppm = 10\nskew = 0.0\naniso_ppm = 5.0"), [], ["one way only"]),
    ("principal_two.toml", model(site='label = "A"\nprincipal_ppm = [10.0, 5.0]\n'), [], ["principal_ppm", "3"]),
    ("principal_and_shift.toml", s("principal_ppm = [10.0, 5.0, 0.0]"), [], ["principal_ppm", "shift_ppm"]),
    ("euler_two.toml", s("euler_deg = [0.0, 90.0]"), [], ["euler_deg", "3 angles"]),
    ("euler_big.toml", s("span_ppm = 10\nskew = 0.0\neuler_deg = [0.0, 400.0, 0.0]"), [],
     ["euler_deg = 400.0", "allowed range"]),
    ("label_empty.toml", model(site='label = ""\ncq_mhz = 3.0\n'), [], ["label", "non-empty"]),
    ("label_number.toml", model(site='label = 5\ncq_mhz = 3.0\n'), [], ["label = 5", "text"]),
    ("site_typo.toml", s("cq = 3.0"), [], ["unknown key 'cq'"]),
    ("shift_text.toml", model(site='label = "A"\nshift_ppm = "sixty"\n'), [], ["shift_ppm", "must be a number"]),
    ("shift_nan.toml", model(site='label = "A"\nshift_ppm = nan\n'), [], ["shift_ppm = nan", "allowed range"]),
    ("cq_inf.toml", model(site='label = "A"\ncq_mhz = inf\n'), [], ["cq_mhz = inf", "allowed range"]),
    ("free_start_outside.toml", model(site='label = "A"\ncq_mhz = { start = 9.0, min = 1.0, max = 8.0 }\n'), [],
     ["cq_mhz", "outside its own range"]),
    ("free_no_start.toml", model(site='label = "A"\ncq_mhz = { min = 1.0, max = 8.0 }\n'), [],
     ["cq_mhz", "needs 'start'"]),
    ("free_min_above_max.toml", model(site='label = "A"\ncq_mhz = { start = 3.0, min = 8.0, max = 1.0 }\n'), [],
     ["cq_mhz", "below max"]),
    ("free_unknown_field.toml", model(site='label = "A"\ncq_mhz = { start = 3.0, step = 0.1 }\n'), [],
     ["cq_mhz", "unknown key 'step'"]),
    ("tie_unknown_site.toml", model(sites=[BASE_SITE + "gauss_hz = 100.0\n",
                                           'label = "B"\ngauss_hz = { same_as = "C.gauss_hz" }\n']), [],
     ["same_as", "no site 'C'"]),
    ("tie_other_key.toml", model(sites=[BASE_SITE + "gauss_hz = 100.0\n",
                                         'label = "B"\ngauss_hz = { same_as = "A.lorentz_hz" }\n']), [],
     ["same_as", "same key"]),
    ("tie_to_itself.toml", model(site='label = "A"\ngauss_hz = { same_as = "A.gauss_hz" }\n'), [],
     ["gauss_hz", "tied to itself"]),
    # --- fit table
    ("fit_region_three.toml", model(extra='[fit]\nregions = [[1.0, 2.0, 3.0]]\n'), [], ["regions", "two numbers"]),
    ("fit_baseline_order.toml", model(extra='[fit]\nbaseline_order = 9\n'), [], ["baseline_order = 9", "[0, 5]"]),
    ("fit_unknown_key.toml", model(extra='[fit]\nmethod = "lm"\n'), [], ["fit", "unknown key 'method'"]),
    # --- command-line arguments, with a valid model
    ("ok_plot_gif.toml", model(), ["--plot", "{tmp}/out.gif"], ["plot", ".gif", ".png"]),
    ("ok_plot_same_as_output.toml", model(), ["-o", "{tmp}/fig.png", "--plot", "{tmp}/fig.png"], ["same file"]),
    ("ok_output_is_model.toml", model(), ["-o", "{model}", "--force"], ["input file"]),
    ("ok_output_is_folder.toml", model(), ["-o", "{tmp}", "--force"], ["is a directory"]),
    ("ok_output_exists.toml", model(), ["-o", "{existing}"], ["exists", "--force"]),
    ("ok_output_in_proc.toml", model(), ["-o", "/proc/powderspin-out.csv"], ["/proc/powderspin-out.csv",
                                                                             "cannot be written"]),
    ("ok_range.toml", model(), ["--plot", "{tmp}/p.png", "--range", "abc"], ["--range", "A:B"]),
    ("ok_zoom.toml", model(), ["--plot", "{tmp}/p.png", "--zoom", "0.5"], ["--zoom", "> 1"]),
    ("ok_measurement_index.toml", model(), ["--measurement", "3"], ["--measurement", "[1, 1]"]),
]


def main() -> None:
    import tomli_w

    for old in HERE.glob("*.toml"):
        if old.name != "cases.toml":
            old.unlink()
    manifest = []
    for name, content, args, expect in CASES:
        path = HERE / name
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
        manifest.append({"file": name, "args": args, "expect": expect})
    head = ("# Bad model files and arguments, one problem each, with the words their one-line error must contain.\n"
            "# Written by make_models.py; {tmp} is an empty temporary folder, {model} the model file itself,\n"
            "# {existing} a file that exists there before the run.\n")
    (HERE / "cases.toml").write_text(head + tomli_w.dumps({"case": manifest}), encoding="utf-8")
    print(f"wrote {len(CASES)} cases")


if __name__ == "__main__":
    main()
