"""The learning side of sounding: embedding, retrieval, features, regressor,
calibration, evaluation and segment statistics.

Nothing here knows about HTTP, SQL or the command line; the service package
feeds it arrays and records.
"""
