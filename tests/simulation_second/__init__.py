"""A second simulated fleet, written without reading the fitter, for scoring the life forecast."""
