"""Safety stage: IEEE Std 80 tolerable voltages, fault-current derivation, conductor sizing and the
simplified (hand-calculation) method."""
