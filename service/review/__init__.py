"""Choices about a draft: best hours, wordings compared, the rule that tells options apart."""
