"""A draft's forecast: history -> retrieval -> features -> model -> answer; training."""
