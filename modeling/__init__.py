"""Junction physics, small-signal model, fitters and model cards: pure numpy/scipy."""
