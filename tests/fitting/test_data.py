"""What a fit reads from raw data: spikelet data and the measurement's comb must be the same echo train (SYNTHETIC
echo trains written through nmrglue's Bruker writer)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.fitting.data import FitError, read_measured
from powderspin.model.modelfile import parse_model
from powderspin.physics.nuclides import get_nuclide
from tests.processing.synthetic import write_bruker

DWELL = 2e-6
PERIOD = 100          # points per echo: 200 us
ECHOES = 10


def _train_folder(path):
    """Ten Gaussian echoes (tops at 50, 150, ... points) of a line 20 kHz above the carrier, decaying over the train."""
    nu = get_nuclide("93Nb").larmor_hz(9.4)
    t = np.arange(ECHOES * PERIOD)
    s = np.zeros(t.size, complex)
    for k in range(ECHOES):
        top = PERIOD // 2 + k * PERIOD
        s += np.exp(-k / 20.0) * np.exp(-((t - top) / 8.0) ** 2) * np.exp(2j * np.pi * 2e4 * (t - top) * DWELL)
    return write_bruker(path, s, dwell_s=DWELL, sfo1_mhz=nu / 1e6, bf1_mhz=nu / 1e6, nucleus="93Nb", group_delay=0.0,
                        integer=False)


def _model(processing, measurement=None):
    return parse_model({"nucleus": "93Nb", "measurement": {"field_tesla": 9.4, **(measurement or {})},
                        "site": [{"cq_mhz": 20.0, "eta_q": 0.2}], "processing": processing})


def test_spikelet_data_give_the_comb_its_echoes(tmp_path):
    folder = _train_folder(tmp_path / "train")
    period_us = PERIOD * DWELL * 1e6
    # the processing's count, written once: the measurement takes it; the data hold that many echoes
    model = _model({"echo_train": "spikelets", "echo_period_us": period_us, "echo_count": ECHOES})
    spec, *_ = read_measured(str(folder), model, 0, None, False)
    assert model.measurements[0].echo_train_echoes == ECHOES
    assert spec.metadata["processing"]
    # every echo of the data transformed (no echo_count) while the comb keeps its default of 32 echoes: refused,
    # saying what to write
    model = _model({"echo_train": "spikelets", "echo_period_us": period_us})
    with pytest.raises(FitError, match=f"holds {ECHOES} echoes but the measurement's comb has echo_train_echoes = 32; "
                                       f"write echo_count = {ECHOES} in .processing."):
        read_measured(str(folder), model, 0, None, False)
