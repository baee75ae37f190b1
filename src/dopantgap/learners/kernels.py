"""Two small Gaussian-process kernels the table needs and scikit-learn lacks.

``OnColumns`` lets a kernel see only some input columns, so one covariance can be
built from parts that look at different kinds of input (descriptors, column
indicators, element identity). ``SameLabel`` is 1 where two rows carry the same
integer label and 0 elsewhere: multiplied by a constant it is a random offset shared
by every row with that label, for example everything one element does that no
descriptor explains.
"""

import numpy as np
from sklearn.gaussian_process.kernels import Hyperparameter, Kernel

__all__ = ["OnColumns", "SameLabel"]


class OnColumns(Kernel):
    """Apply ``kernel`` to the columns ``columns`` of the inputs only.

    Parameters
    ----------
    kernel : Kernel
        The kernel evaluated on the selected columns; its hyperparameters are this
        kernel's hyperparameters (prefixed ``kernel__``), so they are optimised as usual.
    columns : tuple of int
        Column indices of ``X`` passed to ``kernel``.

    Examples
    --------
    >>> import numpy as np
    >>> from sklearn.gaussian_process.kernels import RBF
    >>> X = np.array([[0.0, 5.0], [1.0, 5.0]])
    >>> OnColumns(RBF(1.0), (0,))(X).round(3).tolist()
    [[1.0, 0.607], [0.607, 1.0]]
    """

    def __init__(self, kernel, columns):
        self.kernel = kernel
        self.columns = columns

    def get_params(self, deep=True):
        params = dict(kernel=self.kernel, columns=self.columns)
        if deep:
            params.update(("kernel__" + key, value) for key, value in self.kernel.get_params().items())
        return params

    @property
    def hyperparameters(self):
        return [
            Hyperparameter("kernel__" + hp.name, hp.value_type, hp.bounds, hp.n_elements)
            for hp in self.kernel.hyperparameters
        ]

    @property
    def theta(self):
        return self.kernel.theta

    @theta.setter
    def theta(self, theta):
        self.kernel.theta = theta

    @property
    def bounds(self):
        return self.kernel.bounds

    def _select(self, X):
        return None if X is None else np.asarray(X)[:, list(self.columns)]

    def __call__(self, X, Y=None, eval_gradient=False):
        return self.kernel(self._select(X), self._select(Y), eval_gradient=eval_gradient)

    def diag(self, X):
        return self.kernel.diag(self._select(X))

    def is_stationary(self):
        return self.kernel.is_stationary()

    @property
    def requires_vector_input(self):
        return True

    def __eq__(self, other):
        return (
            type(self) is type(other)
            and self.kernel == other.kernel
            and tuple(self.columns) == tuple(other.columns)
        )

    def __repr__(self):
        return f"OnColumns({self.kernel!r}, columns={tuple(self.columns)})"


class SameLabel(Kernel):
    """k(x, x') = 1 if the first column of x equals that of x', else 0.

    It has no hyperparameters of its own; scale it with a ``ConstantKernel``.
    Rows whose label never occurred in training get no covariance with the training
    rows, which is what a never-seen element should get.
    """

    def __init__(self):
        pass

    def __call__(self, X, Y=None, eval_gradient=False):
        labels_x = np.asarray(X)[:, 0]
        labels_y = labels_x if Y is None else np.asarray(Y)[:, 0]
        K = (labels_x[:, None] == labels_y[None, :]).astype(float)
        if eval_gradient:
            if Y is not None:
                raise ValueError("Gradient can only be evaluated when Y is None.")
            return K, np.empty((K.shape[0], K.shape[0], 0))
        return K

    def diag(self, X):
        return np.ones(np.asarray(X).shape[0])

    def is_stationary(self):
        return False

    @property
    def requires_vector_input(self):
        return True

    def __repr__(self):
        return "SameLabel()"
