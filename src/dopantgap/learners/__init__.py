"""Regressors that return a mean and a standard deviation for every cell."""

from dopantgap.learners.boosted import BoostLearner
from dopantgap.learners.column_mean import ColumnMeanLearner
from dopantgap.learners.gaussian_process import GPLearner
from dopantgap.learners.host_transfer import HostTransferGP
from dopantgap.learners.kernels import OnColumns, SameLabel
from dopantgap.learners.shift_prior import ShiftPriorLearner

__all__ = ["BoostLearner", "ColumnMeanLearner", "GPLearner", "HostTransferGP", "OnColumns", "SameLabel", "ShiftPriorLearner"]
