"""Fitting the glass-box families, the scikit-learn estimators, and the comparison with a black box
on the same folds."""
