"""The history as arrays, and the nearest earlier posts of a vector under filters."""
