"""The fitted model: an immutable value that predicts.

A `Model` holds everything needed to predict and nothing that runs code:
layer sizes, activation and head names, the preparation constants, the
weights of each repeat (member) as read-only float64 vectors, the settings
used and the record of how each member's training ended.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping, Sequence

import numpy as np

from . import network
from .errors import ModelError
from .preparation import Preparation, TargetPreparation

FORMAT_VERSION = 3  # of the model block (sheetnet.block) this model is written as, or was read from


@dataclass(frozen=True, eq=False)  # arrays inside: compare members by identity
class Member:
    """One trained network of a model (a model with repeats has several).

    A curve is its losses (``training_curve``) beside the epoch of each point
    (``training_epochs``). A fresh fit records every epoch, so its epochs are
    ``range(1, epochs + 1)``, filled in when not given; a model read from a
    block has at most 200 points per curve, at the epochs the block stored.
    """

    theta: np.ndarray  # flat parameters, read-only float64
    stopped_by: str
    epochs: int
    training_curve: tuple[float, ...]
    validation_curve: tuple[float, ...]  # empty when no validation share was held back
    best_epoch: int  # the epoch whose parameters were kept (== epochs without early stopping)
    training_epochs: Sequence[int] = ()  # epoch of each training_curve point; empty: every epoch from 1
    validation_epochs: Sequence[int] = ()  # epoch of each validation_curve point; empty: every epoch from 1

    def __post_init__(self) -> None:
        object.__setattr__(self, "theta", _read_only(self.theta))
        for epochs, curve in (("training_epochs", self.training_curve), ("validation_epochs", self.validation_curve)):
            if not getattr(self, epochs):
                object.__setattr__(self, epochs, range(1, len(curve) + 1))
            if len(getattr(self, epochs)) != len(curve):
                raise ValueError(f"{epochs} has {len(getattr(self, epochs))} points but its curve {len(curve)}")  # internal invariant

    def __reduce__(self) -> tuple[Any, ...]:
        """Pickled as its fields, so `__post_init__` makes the unpickled parameters read-only again."""
        return (Member, (self.theta, self.stopped_by, self.epochs, self.training_curve, self.validation_curve,
                         self.best_epoch, self.training_epochs, self.validation_epochs))


@dataclass(frozen=True, eq=False)  # arrays inside: compare models by identity
class Model:
    """A trained network (or an average of several) with its preparation.

    ``predict(X)`` gives values (regression) or class labels; ``predict_proba(X)``
    gives class probabilities of shape (rows, classes) in the order of `classes`.
    """

    preparation: Preparation
    target: TargetPreparation
    sizes: tuple[int, ...]
    activation: str
    members: tuple[Member, ...]
    algorithm: str
    settings: Mapping[str, Any] = field(default_factory=dict)
    seed: int = 0
    format_version: int = FORMAT_VERSION

    # --- description -----------------------------------------------------------------
    @property
    def task(self) -> str:
        return self.target.task

    @property
    def classes(self) -> tuple[Any, ...]:
        return self.target.classes

    @property
    def hidden(self) -> tuple[int, ...]:
        return self.sizes[1:-1]

    @property
    def head(self) -> str:
        return self.target.head

    @property
    def threshold(self) -> float:
        return float(self.settings.get("threshold", 0.5))

    @property
    def input_names(self) -> tuple[str, ...]:
        return self.preparation.names

    @property
    def stopped_by(self) -> str:
        """The rule that ended training (of the first member when there are repeats)."""
        return self.members[0].stopped_by

    @property
    def epochs(self) -> int:
        return self.members[0].epochs

    @property
    def loss_curve(self) -> dict[str, tuple[float, ...]]:
        """Training and validation loss per epoch of the first member."""
        return {"training": self.members[0].training_curve, "validation": self.members[0].validation_curve}

    def weights(self, member: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
        """``[(W_1, b_1), ...]`` of one member, as read-only views."""
        return network.unpack(self.members[member].theta, self.sizes)

    # --- prediction ------------------------------------------------------------------
    def __post_init__(self) -> None:
        object.__setattr__(self, "settings", MappingProxyType(dict(self.settings)))  # read-only, whatever mapping was given
        layers = [network.unpack(m.theta, self.sizes) for m in self.members]
        folded = None
        if self.preparation.all_numeric:
            mean, scale = self.preparation.numeric_constants()
            folded = [network.fold_input_scaling(p, mean, scale) for p in layers]
        object.__setattr__(self, "_layers", layers)
        object.__setattr__(self, "_folded_layers", folded)  # raw numeric rows skip the scaling pass

    # --- travelling: pickle, joblib and deepcopy rebuild the model from its fields ----------
    def __reduce__(self) -> tuple[Any, ...]:
        """Pickled as its fields (settings as a plain dict); unpickling runs `__post_init__` again, so the copy is as read-only as the original."""
        return (_rebuilt_model, (self.preparation, self.target, self.sizes, self.activation, self.members,
                                 self.algorithm, dict(self.settings), self.seed, self.format_version))

    def _member_outputs(self, X: Any) -> np.ndarray:
        """Network outputs of every member: shape (members, rows, outputs)."""
        raw = self.preparation.numeric_rows(X) if self._folded_layers is not None else None  # type: ignore[attr-defined]
        if raw is not None:
            try:
                return np.stack([network.forward_layers(p, self.activation, self.head, raw) for p in self._folded_layers])  # type: ignore[attr-defined]
            except ValueError:
                self.preparation.transform(X)  # names the bad cell
                raise
        inputs = self.preparation.transform(X)
        return np.stack([network.forward_layers(p, self.activation, self.head, inputs) for p in self._layers])  # type: ignore[attr-defined]

    def _values(self, outputs: np.ndarray) -> np.ndarray:
        return outputs[..., 0] * self.target.scale + self.target.mean

    def _probabilities(self, outputs: np.ndarray) -> np.ndarray:
        if self.task == "binary":
            p = outputs[..., 0]
            return np.stack([1.0 - p, p], axis=-1)
        return outputs

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, shape (rows, classes), averaged over members."""
        if self.task == "regression":
            raise ModelError("this is a regression model; it predicts values, not class probabilities: use predict")
        return self._probabilities(self._member_outputs(X)).mean(axis=0)

    def predict(self, X: Any) -> np.ndarray:
        """Predicted values (regression) or class labels, shape (rows,).

        Binary models predict the second class when its probability is at
        or above the model's ``threshold`` setting.
        """
        if self.task == "regression":
            return self._values(self._member_outputs(X)).mean(axis=0)
        return self.classes_of(self.predict_proba(X))

    def classes_of(self, probabilities: np.ndarray) -> np.ndarray:
        """The predicted class of each row from its probabilities (the threshold decides for two classes)."""
        if self.task == "binary":
            index = (probabilities[:, 1] >= self.threshold).astype(np.int64)
        else:
            index = probabilities.argmax(axis=1)
        return np.asarray(self.classes, dtype=object)[index] if not _all_numbers(self.classes) else np.asarray(self.classes)[index]

    def predict_members(self, X: Any) -> np.ndarray:
        """Each member's own prediction: values (members, rows) or probabilities (members, rows, classes)."""
        outputs = self._member_outputs(X)
        return self._values(outputs) if self.task == "regression" else self._probabilities(outputs)

    def predict_spread(self, X: Any) -> dict[str, np.ndarray]:
        """How far the members disagree: mean, standard deviation, lowest and highest member.

        Values for regression (shape (rows,)), probabilities for classes
        (shape (rows, classes)). With one member the spread is zero.
        """
        each = self.predict_members(X)
        return {"mean": each.mean(axis=0), "std": each.std(axis=0), "low": each.min(axis=0), "high": each.max(axis=0)}

    def out_of_range(self, X: Any) -> np.ndarray:
        """Per row, True when any numeric input lies outside the range seen in training."""
        return self.preparation.out_of_range(X)


def _rebuilt_model(*fields: Any) -> Model:
    return Model(*fields)


def _read_only(theta: Any) -> np.ndarray:
    """The parameters as a float64 vector nobody can write to (an unpickled array comes back writable)."""
    array = np.asarray(theta, dtype=np.float64)
    if array.flags.writeable:
        array = array.copy()  # never freeze the caller's own array
        array.setflags(write=False)
    return array


def _all_numbers(values: tuple[Any, ...]) -> bool:
    return all(isinstance(v, (int, float, np.number)) and not isinstance(v, bool) for v in values)
