"""One fitted stage's mean for several columns, evaluated fast from the descriptors."""

import numpy as np
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, Product, Sum, WhiteKernel

from dopantgap.explain.descriptors import _ColumnEncoding
from dopantgap.learners import BoostLearner, GPLearner, OnColumns, ShiftPriorLearner

# Rows of descriptor matrices evaluated at once (keeps kernel blocks in cache, and
# the covariance a learner's own predict forms small; common practice, no source).
_CHUNK_ROWS = 1024
# Label of an element the model never saw: no atomic number is 0.
_UNSEEN_LABEL = 0.0


class _Unsupported(Exception):
    """A kernel form the direct Gaussian-process evaluation does not know."""


def _flatten(kernel, kind):
    if isinstance(kernel, kind):
        return _flatten(kernel.k1, kind) + _flatten(kernel.k2, kind)
    return [kernel]


class _PhysicalFactor:
    """Cross-covariance of query rows with the training rows for one kernel factor.

    Stationary Matern (nu 0.5, 1.5, 2.5) and RBF factors are evaluated from squared
    distances formed by a matrix product, in place; other kernels by their own call.
    """

    def __init__(self, factor, train):
        self.columns = [int(column) for column in factor.columns]
        inner = factor.kernel
        self.factor = factor
        self.train = train
        self.kind = None
        if isinstance(inner, Matern) and float(inner.nu) in (0.5, 1.5, 2.5):
            self.kind = float(inner.nu)
        elif type(inner) is RBF:
            self.kind = "rbf"
        if self.kind is not None:
            self.length_scale = np.asarray(inner.length_scale, dtype=float)
            self.scaled_train = train[:, self.columns] / self.length_scale
            self.train_norms = np.einsum("ij,ij->i", self.scaled_train, self.scaled_train)

    def __call__(self, queries):
        if self.kind is None:
            # the factor takes full rows; only its own columns matter
            rows = np.zeros((queries.shape[0], self.train.shape[1]))
            rows[:, : queries.shape[1]] = queries
            return self.factor(rows, self.train)
        scaled = queries[:, self.columns] / self.length_scale
        squared = scaled @ self.scaled_train.T
        squared *= -2.0
        squared += np.einsum("ij,ij->i", scaled, scaled)[:, None]
        squared += self.train_norms[None, :]
        np.maximum(squared, 0.0, out=squared)
        if self.kind == "rbf":
            squared *= -0.5
            return np.exp(squared, out=squared)
        distance = np.sqrt(squared, out=squared)
        if self.kind == 0.5:
            distance *= -1.0
            return np.exp(distance, out=distance)
        distance *= np.sqrt(3.0) if self.kind == 1.5 else np.sqrt(5.0)
        decay = np.exp(-distance)
        if self.kind == 1.5:
            distance += 1.0
        else:
            polynomial = distance * distance
            polynomial /= 3.0
            polynomial += distance
            polynomial += 1.0
            distance = polynomial
        distance *= decay
        return distance


# Training rows used to read a regressor's target normalisation from its predictions
# (common practice, no source: two would do in exact arithmetic; more average rounding).
_NORMALISATION_PROBES = 64


def _target_normalisation(regressor, train, alpha):
    """Mean and scale a fitted ``GaussianProcessRegressor`` puts its target back with.

    With ``normalize_y`` its mean at x is ``mean + scale * kernel_(x, X_train_) @ alpha_``
    (Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", eq. 2.25, on
    the standardised target). Both numbers are read from that identity through public
    attributes and ``predict`` at some training rows (a straight-line fit), instead of
    the regressor's private attributes, which change without notice between releases.
    """
    probes = train[:: max(1, len(train) // _NORMALISATION_PROBES)][:_NORMALISATION_PROBES]
    latent = regressor.kernel_(probes, train) @ alpha
    predicted = np.asarray(regressor.predict(probes), dtype=float).ravel()
    spread = latent - latent.mean()
    if len(probes) < 2 or float(spread @ spread) <= 1e-12 * max(1.0, float(latent @ latent)):
        # too little variation among the probes to separate mean from scale
        raise _Unsupported
    scale = float(spread @ (predicted - predicted.mean()) / (spread @ spread))
    mean = float(predicted.mean() - scale * latent.mean())
    if not (np.isfinite(scale) and scale > 0 and np.isfinite(mean)):
        raise _Unsupported
    return mean, scale


def _inner_learner(learner):
    """The learner that carries a stage's descriptors, and the constant added to it: a
    correction's shift prior around a learner predicts its pooled shift plus that learner."""
    inner = getattr(learner, "residual_learner_", None) if isinstance(learner, ShiftPriorLearner) else None
    if inner is None:
        return learner, 0.0
    return inner, float(learner.pooled_)


class _StageColumns:
    """Mean of one stage for several columns, for elements given by their descriptors."""

    def __init__(self, stage, columns, features, compositions):
        self.stage = stage
        self.columns = list(columns)
        self.n_features = len(features)
        self.encodings = [
            _ColumnEncoding(stage.encoder, features, host, site, compositions) for host, site in self.columns
        ]
        self.fast = None
        # a correction's shift prior around a learner adds a constant (its pooled shift)
        self.learner, self.offset = _inner_learner(stage.learner)
        if isinstance(self.learner, GPLearner):
            try:
                self.fast = self._prepare_fast()
            except _Unsupported:
                self.fast = None
        elif isinstance(self.learner, BoostLearner):
            # the mean only: the learner's predict also forms an n x n covariance
            self.fast = {"boost": True}

    # generic path: the learner's own predict on encoded rows
    def predict_rows(self, descriptors, labels):
        out = np.empty((descriptors.shape[0], len(self.columns)))
        for position, encoding in enumerate(self.encodings):
            for start in range(0, descriptors.shape[0], _CHUNK_ROWS):
                part = slice(start, start + _CHUNK_ROWS)
                label_part = labels if np.ndim(labels) == 0 else np.asarray(labels)[part]
                out[part, position] = self.stage.learner.predict(
                    encoding.rows(descriptors[part], label_part)
                )
        return out

    # direct Gaussian-process path
    def _prepare_fast(self):
        regressor = self.learner.regressor_
        if not hasattr(regressor, "X_train_"):
            raise _Unsupported  # conditioned in blocks: each block has its own weights
        n_physical = self.stage.encoder.n_physical_
        physical = set(range(n_physical))
        train = regressor.X_train_
        alpha = np.asarray(regressor.alpha_, dtype=float)
        if alpha.ndim != 1:
            raise _Unsupported
        target_mean, target_scale = _target_normalisation(regressor, train, alpha)
        terms = []
        for term in _flatten(regressor.kernel_, Sum):
            factors = _flatten(term, Product)
            if any(isinstance(factor, WhiteKernel) for factor in factors):
                continue  # no covariance between a new point and a training point
            constant, physical_factors, column_factors = 1.0, [], []
            for factor in factors:
                if isinstance(factor, ConstantKernel):
                    constant *= float(factor.constant_value)
                elif isinstance(factor, OnColumns):
                    used = {int(column) for column in factor.columns}
                    if used <= physical:
                        physical_factors.append(_PhysicalFactor(factor, train))
                    elif not used & physical:
                        column_factors.append(factor)
                    else:
                        raise _Unsupported
                else:
                    raise _Unsupported
            weights = np.empty((len(train), len(self.columns)))
            for position, encoding in enumerate(self.encodings):
                # the physical block does not matter to factors on the other columns
                row = encoding.rows(np.zeros((1, self.n_features)), _UNSEEN_LABEL)
                value = np.full(len(train), constant)
                for factor in column_factors:
                    value = value * factor(row, train)[0]
                weights[:, position] = value * alpha
            if np.any(weights != 0.0):
                terms.append((physical_factors, weights))
        groups = {}
        for position, encoding in enumerate(self.encodings):
            groups.setdefault(encoding.physical_key, []).append(position)
        return {
            "terms": terms,
            "groups": [(self.encodings[members[0]], np.array(members)) for members in groups.values()],
            "mean": target_mean + self.offset,
            "scale": target_scale,
        }

    def _predict_boost(self, descriptors):
        learner = self.learner
        labels = {int(column) for column in learner.label_columns}
        out = np.empty((descriptors.shape[0], len(self.columns)))
        for position, encoding in enumerate(self.encodings):
            rows = encoding.rows(descriptors, _UNSEEN_LABEL)
            kept = [column for column in range(rows.shape[1]) if column not in labels]
            inputs = rows[:, kept] if kept else np.zeros((rows.shape[0], 1))
            # an unseen label has no offset: the members' mean is the prediction
            out[:, position] = np.mean([member.predict(inputs) for member in learner.members_], axis=0)
        return out + self.offset

    def _predict_fast(self, descriptors):
        fast = self.fast
        if "boost" in fast:
            return self._predict_boost(descriptors)
        out = np.zeros((descriptors.shape[0], len(self.columns)))
        for start in range(0, descriptors.shape[0], _CHUNK_ROWS):
            part = slice(start, start + _CHUNK_ROWS)
            for encoding, members in fast["groups"]:
                queries = encoding.physical(descriptors[part])
                total = np.zeros((queries.shape[0], len(members)))
                for physical_factors, weights in fast["terms"]:
                    if physical_factors:
                        block = physical_factors[0](queries)
                        for factor in physical_factors[1:]:
                            block *= factor(queries)
                        total += block @ weights[:, members]
                    else:
                        total += weights[:, members].sum(axis=0)
                out[part, members] = total
        return out * fast["scale"] + fast["mean"]

    def check_fast(self, descriptors):
        """Keep the direct path only if it reproduces the learner's predict."""
        if self.fast is None:
            return
        direct = self._predict_fast(descriptors)
        reference = self.predict_rows(descriptors, _UNSEEN_LABEL)
        if not np.allclose(direct, reference, rtol=1e-7, atol=1e-9):
            self.fast = None

    def predict_unseen(self, descriptors):
        """Mean for never-seen elements with these descriptors, one column per column."""
        if self.fast is not None:
            return self._predict_fast(descriptors)
        return self.predict_rows(descriptors, _UNSEEN_LABEL)
