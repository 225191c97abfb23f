"""The simulated rig as a whole: its truth record and how instruments treat bad values."""

from __future__ import annotations

import json

from sim_instruments.sample_model import BilayerSample, SampleParameters
from sim_instruments.world import sample_overrides
from tests.test_drivers_support import OhmicSample, make_rig, simulated


def test_truth_is_json_ready_and_holds_sample_and_world() -> None:
    sample = BilayerSample(SampleParameters(), seed=7)
    with simulated(make_rig(), sample) as (simulated_rig, _):
        truth = json.loads(json.dumps(simulated_rig.truth()))
    assert truth["sample"]["seed"] == 7
    assert truth["sample"]["resistance_ohm"] > 0
    assert truth["world"]["temperature_time_constant_s"] == 30.0
    assert truth["world"]["voltmeter_probes"] == {"vxx": "longitudinal", "vxy": "transverse"}


def test_bad_values_go_to_the_error_queue_and_clear_status_empties_it() -> None:
    with simulated(make_rig(), OhmicSample()) as (simulated_rig, drivers):
        raw = simulated_rig.resource_manager.open_resource(
            "GPIB0::21::INSTR", read_termination="\n", write_termination="\n"
        )
        raw.write("SENS:VOLT:NPLC -1")
        raw.write("SENS:VOLT:NPLC lots")
        # SCPI-99 vol. 1: -222 "Data out of range", -104 "Data type error".
        assert drivers["vxx"].errors() == ['-222,"Data out of range"', '-104,"Data type error"']
        raw.write("SENS:VOLT:NPLC -1")
        raw.write("*CLS")
        assert drivers["vxx"].errors() == []
        raw.close()
        assert simulated_rig.world.instruments["vxx"].nplc == 1.0


def test_world_keys_are_kept_out_of_the_sample_parameters() -> None:
    assert sample_overrides({"start_temperature_K": 10, "amr_ratio": 1e-3}) == {"amr_ratio": 1e-3}
