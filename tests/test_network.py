"""The network math: gradients against central differences, forward pass against scikit-learn."""

import itertools

import numpy as np
import pytest
from sklearn.neural_network import MLPClassifier, MLPRegressor

from sheetnet import network

HEAD_OUTPUTS = {"squared_error": 2, "binary_cross_entropy": 1, "cross_entropy": 3}


def _targets(head: str, rows: int, outputs: int, rng: np.random.Generator) -> np.ndarray:
    if head == "squared_error":
        return rng.normal(size=(rows, outputs))
    if head == "binary_cross_entropy":
        return (rng.random((rows, 1)) < 0.5).astype(float)
    return np.eye(outputs)[rng.integers(0, outputs, rows)]


def _central_difference(objective, theta: np.ndarray, step: float = 1e-6) -> np.ndarray:
    grad = np.zeros_like(theta)
    for i in range(len(theta)):
        up, down = theta.copy(), theta.copy()
        up[i] += step
        down[i] -= step
        grad[i] = (objective(up)[0] - objective(down)[0]) / (2 * step)
    return grad


@pytest.mark.parametrize(
    "activation, head, decay, hidden",
    [
        (a, h, d, hid)
        for a, h, d, hid in itertools.product(network.ACTIVATIONS, network.HEADS, (0.0, 0.3), ((5,), (4, 3)))
    ]
    + [("tanh", h, d, ()) for h in network.HEADS for d in (0.0, 0.3)],
)
def test_gradient_matches_central_differences(activation, head, decay, hidden, rng):
    outputs = HEAD_OUTPUTS[head]
    sizes = (3, *hidden, outputs)
    X = rng.normal(size=(17, 3))
    Y = _targets(head, 17, outputs, rng)
    objective = network.Objective(sizes, activation, head, X, Y, decay)
    theta = rng.normal(scale=0.7, size=network.parameter_count(sizes))
    _, analytic = objective(theta)
    numeric = _central_difference(objective, theta)
    relative = np.linalg.norm(analytic - numeric) / max(np.linalg.norm(analytic), np.linalg.norm(numeric))
    assert relative < 1e-6


def test_batch_objective_is_the_mean_over_its_rows_plus_the_spread_penalty(rng):
    sizes = (3, 4, 1)
    X = rng.normal(size=(20, 3))
    Y = rng.normal(size=(20, 1))
    theta = rng.normal(size=network.parameter_count(sizes))
    whole = network.Objective(sizes, "tanh", "squared_error", X, Y, decay=0.5, batch_rows=8)
    loss, grad = whole(theta, 4, 12)
    part = network.Objective(sizes, "tanh", "squared_error", X[4:12], Y[4:12], decay=0.5)
    part_loss, part_grad = part(theta)
    penalty = whole.penalty(theta)
    # the batch carries the penalty divided by all 20 rows, the 8-row table by its own 8 rows
    assert loss == pytest.approx(part_loss - penalty / 8 + penalty / 20, rel=1e-12)
    weights = np.zeros_like(theta, bool)
    for w, _, _ in network.layout(sizes):
        weights[w] = True
    expected = part_grad.copy()
    expected[weights] += (0.5 / 20 - 0.5 / 8) * theta[weights]
    np.testing.assert_allclose(grad, expected, rtol=1e-12, atol=1e-14)


def test_pack_and_unpack_are_inverse(rng):
    sizes = (4, 3, 2)
    theta = rng.normal(size=network.parameter_count(sizes))
    params = network.unpack(theta, sizes)
    assert [w.shape for w, _ in params] == [(4, 3), (3, 2)]
    np.testing.assert_array_equal(network.pack(params), theta)


def _sklearn_weights(sizes, rng):
    coefs = [rng.normal(scale=0.8, size=(a, b)) for a, b in zip(sizes[:-1], sizes[1:])]
    intercepts = [rng.normal(scale=0.3, size=b) for b in sizes[1:]]
    return coefs, intercepts


@pytest.mark.parametrize("activation", ["logistic", "tanh", "relu"])
@pytest.mark.parametrize("hidden", [(5,), (4, 3)])
def test_forward_equals_scikit_learn_regressor(activation, hidden, rng):
    # Reference: scikit-learn's MLPRegressor forward pass with weights set by hand.
    X = rng.normal(size=(30, 4))
    sizes = (4, *hidden, 1)
    reference = MLPRegressor(hidden_layer_sizes=hidden, activation=activation)
    reference.partial_fit(X, rng.normal(size=30))
    coefs, intercepts = _sklearn_weights(sizes, rng)
    reference.coefs_, reference.intercepts_ = coefs, intercepts
    theta = network.pack(list(zip(coefs, intercepts)))
    ours = network.forward(theta, sizes, activation, "squared_error", X)[:, 0]
    np.testing.assert_allclose(ours, reference.predict(X), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("activation", ["logistic", "tanh", "relu"])
@pytest.mark.parametrize("n_classes", [2, 3])
def test_forward_equals_scikit_learn_classifier(activation, n_classes, rng):
    # Reference: scikit-learn's MLPClassifier (logistic output for two classes, softmax for more).
    X = rng.normal(size=(30, 4))
    labels = np.arange(30) % n_classes
    outputs = 1 if n_classes == 2 else n_classes
    sizes = (4, 6, outputs)
    reference = MLPClassifier(hidden_layer_sizes=(6,), activation=activation)
    reference.partial_fit(X, labels, classes=np.arange(n_classes))
    coefs, intercepts = _sklearn_weights(sizes, rng)
    reference.coefs_, reference.intercepts_ = coefs, intercepts
    theta = network.pack(list(zip(coefs, intercepts)))
    head = "binary_cross_entropy" if n_classes == 2 else "cross_entropy"
    ours = network.forward(theta, sizes, activation, head, X)
    expected = reference.predict_proba(X)
    if n_classes == 2:
        expected = expected[:, 1:]
    np.testing.assert_allclose(ours, expected, rtol=1e-12, atol=1e-12)


def test_float32_objective_agrees_with_float64(rng):
    sizes = (5, 8, 3)
    X = rng.normal(size=(200, 5))
    Y = np.eye(3)[rng.integers(0, 3, 200)]
    theta = rng.normal(scale=0.5, size=network.parameter_count(sizes))
    loss64, grad64 = network.Objective(sizes, "tanh", "cross_entropy", X, Y, 0.1)(theta)
    loss32, grad32 = network.Objective(sizes, "tanh", "cross_entropy", X, Y, 0.1, dtype=np.float32)(theta)
    assert grad32.dtype == np.float64
    assert loss32 == pytest.approx(loss64, rel=1e-5)
    np.testing.assert_allclose(grad32, grad64, rtol=1e-3, atol=1e-5)


@pytest.mark.parametrize("activation", ["tanh", "logistic", "relu"])
def test_initial_weights_follow_the_glorot_bound(activation, rng):
    sizes = (10, 20, 1)
    theta = network.initial_parameters(sizes, activation, rng)
    (w1, b1), (w2, _) = network.unpack(theta, sizes)
    # Glorot & Bengio 2010, uniform initialisation, the same bound for every activation (no gain)
    for w, bound in ((w1, np.sqrt(6 / 30)), (w2, np.sqrt(6 / 21))):
        assert np.abs(w).max() <= bound
        assert np.abs(w).max() > 0.8 * bound
    assert not b1.any()


@pytest.mark.parametrize("batch_rows", [None, 7])  # columns (full batch) and rows (mini-batches)
def test_shuffles_keep_inputs_and_targets_together(batch_rows, rng):
    sizes = (2, 3, 1)
    X = np.column_stack([np.arange(30.0), -np.arange(30.0)])
    Y = np.arange(30.0)[:, None] * 10
    objective = network.Objective(sizes, "tanh", "squared_error", X, Y, decay=0.0, batch_rows=batch_rows)
    theta = rng.normal(size=network.parameter_count(sizes))
    before = objective(theta)[0]
    seen = set()
    for _ in range(3):  # the spare buffers swap with the current ones each time
        objective.shuffle(rng)
        rows = objective._inputs(0, 30)  # (inputs, rows)
        targets = objective._targets(0, 30)
        np.testing.assert_array_equal(rows[1], -rows[0])
        np.testing.assert_array_equal(targets[0], rows[0] * 10)
        assert sorted(rows[0]) == list(range(30))
        seen.add(tuple(rows[0]))
    assert len(seen) == 3  # really reordered
    assert objective(theta)[0] == pytest.approx(before, rel=1e-12)  # the same rows, so the same mean loss


def test_prediction_in_blocks_equals_row_by_row(rng):
    sizes = (4, 6, 3)
    params = network.unpack(rng.normal(size=network.parameter_count(sizes)), sizes)
    X = rng.normal(size=(network.PREDICT_CHUNK_ROWS * 2 + 5, 4))  # several blocks, BLAS pinned to one thread
    whole = network.forward_layers(params, "relu", "cross_entropy", X)
    rows = np.vstack([network.forward_layers(params, "relu", "cross_entropy", X[i:i + 1]) for i in range(0, len(X), 97)])
    np.testing.assert_allclose(whole[::97], rows, rtol=1e-12)
