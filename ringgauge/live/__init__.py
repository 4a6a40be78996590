"""The live bench view without Qt: frame sources, the ring tracker, the settle indicator and the sign read from
the rings' motion, and generated bench sequences for tests, demos and training."""
