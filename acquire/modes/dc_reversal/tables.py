"""The tables DC current reversal writes: one row per voltmeter reading, one per (point,
channel) of reduced values."""

from __future__ import annotations

from acquire.store.csvw import Column
from acquire.store.tables import TableSchema, readback_columns, setpoint_columns

READINGS = TableSchema(
    "readings.csv",
    "one row per voltmeter reading",
    (
        Column("point", "integer", "", "point number in measurement order (stable for a protocol)"),
        Column("attempt", "integer", "", "0 for the first measurement of the point, +1 per retry"),
        Column("cycle", "integer", "", "alternation cycle within the point"),
        Column("step", "integer", "", "position of this polarity in the alternation pattern"),
        Column("repeat", "integer", "", "reading number within the step"),
        Column("time_s", "double", "s", "seconds since the run started (run clock)"),
        Column("timestamp", "dateTime", "", "ISO 8601 UTC time of the reading"),
        *setpoint_columns(),
        Column("current_A", "double", "A", "current as applied, signed"),
        Column("polarity", "integer", "", "+1, 0 or -1"),
        Column("channel", "string", "", "voltmeter name in the rig"),
        Column("voltage_V", "double", "V", "the reading"),
        *readback_columns("at this step"),
        Column("flags", "string", "",
               "'|'-separated problems: retry, compliance, instrument_error"),
    ),
)

POINTS = TableSchema(
    "points.csv",
    "one row per (point, channel)",
    (
        Column("point", "integer", "", "point number"),
        *setpoint_columns(),
        Column("current_A", "double", "A", "current amplitude"),
        Column("current_density_A_m2", "double", "A/m^2",
               "current density in the carrier layer (parallel-resistor model)"),
        Column("channel", "string", "", "voltmeter name"),
        Column("n_cycles", "integer", "", "cycles averaged"),
        Column("resistance_ohm", "double", "ohm", "(V+ - V-)/(2I), mean over cycles"),
        Column("resistance_ohm_err", "double", "ohm", "standard error over cycles"),
        Column("unidirectional_ohm", "double", "ohm", "(V+ + V- - 2V0)/(2I), mean over cycles"),
        Column("unidirectional_ohm_err", "double", "ohm", "standard error over cycles"),
        Column("unidirectional_ratio", "double", "1", "unidirectional_ohm / resistance_ohm"),
        Column("unidirectional_ratio_err", "double", "1", "propagated standard error"),
        Column("offset_V", "double", "V", "zero-current reading (thermoelectric offset)"),
        Column("offset_V_err", "double", "V", "standard error over cycles"),
        Column("flags", "string", "", "'|'-separated flags of the point's readings"),
    ),
)
