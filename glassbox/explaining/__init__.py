"""What a model does and why: reasons, shape tables, points cards, groups, monitoring between
periods and the review of two versions."""
