"""The analyst's questions: distribution, surprises, trends, topics the history holds."""
