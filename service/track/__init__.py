"""The track record: forecasts given, matched to published posts, scored, adapted."""
