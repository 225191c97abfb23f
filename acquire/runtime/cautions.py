"""The cautions the tool shows: in `--help` and before a run on real instruments."""

CAUTION = (
    "Caution: high current densities destroy thin films, magnets quench and store energy, "
    "cryogens asphyxiate and burn, ESD kills devices. Follow your lab's rules and the "
    "instruments' manuals; flipsweep's limits are an extra guard, not a replacement."
)
