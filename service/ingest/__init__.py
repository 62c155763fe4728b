"""Import: CSV records, numbers and times as exports write them, mappings, embedding batches."""
