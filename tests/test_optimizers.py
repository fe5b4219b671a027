"""Each training algorithm against a worked example small enough to follow by hand."""

import inspect

import numpy as np
import pytest
from scipy.optimize import rosen, rosen_der

from sheetnet import optimizers
from sheetnet.settings import ALGORITHMS, SETTINGS_BY_NAME, resolve_settings
from sheetnet.stopping import Monitor, StoppingRules


class Quadratic:
    """f(theta) = sum(scale * theta^2), one row, so every method sees the same function."""

    n_rows = 1

    def __init__(self, scale=1.0):
        self.scale = np.asarray(scale)

    def __call__(self, theta, start=0, stop=None):
        return float(np.sum(self.scale * theta**2)), 2 * self.scale * theta

    def shuffle(self, rng):
        pass


def _monitor(epochs):
    return Monitor(StoppingRules(epochs=epochs, gradient_threshold=0.0, tolerance=0.0, patience=10**6))


def test_gradient_descent_with_momentum_two_steps():
    # worked by hand: g0 = 2; v1 = -0.1*2 = -0.2; theta1 = 0.8; g1 = 1.6; v2 = 0.5*-0.2 - 0.1*1.6 = -0.26; theta2 = 0.54
    theta, reason = optimizers.gradient_descent(Quadratic(), np.array([1.0]), _monitor(2), np.random.default_rng(0), 0.1, 0.5, 0)
    assert reason == "epochs"
    assert theta[0] == pytest.approx(0.54, abs=1e-15)


def test_adam_first_step_has_the_size_of_the_learning_rate():
    # Kingma & Ba 2015, section 2.1: after bias correction the first step is rate * g / (|g| + eps)
    theta0 = np.array([3.0, -2.0, 0.5])
    theta, _ = optimizers.adam(Quadratic(), theta0, _monitor(1), np.random.default_rng(0), 0.01, 0.9, 0.999, 1e-8, 0)
    g = 2 * theta0
    np.testing.assert_allclose(theta, theta0 - 0.01 * g / (np.abs(g) + 1e-8), rtol=1e-12)


@pytest.mark.parametrize(
    "improved, expected",
    [
        # f = theta^2 from 0.07 with Delta_0 = 0.1, eta+ = 1.2, eta- = 0.5, worked by hand:
        # step 1: g = 0.14 -> theta = -0.03 (loss falls from 0.0049 to 0.0009)
        # step 2: g = -0.06 flips sign; Delta = 0.05. Rprop+ undoes step 1 (theta = 0.07);
        #         iRprop+ keeps theta = -0.03 because the loss fell
        # step 3: both move by 0.05 against the sign of g: theta = 0.02
        # step 4: Rprop+: g = 0.04 keeps the sign of 0.14, Delta = 0.06 -> theta = -0.04;
        #         iRprop+: g = 0.04 flips against -0.06, the loss fell, so no move: theta = 0.02
        (False, -0.04),
        (True, 0.02),
    ],
)
def test_rprop_variants_follow_their_sign_rules(improved, expected):
    theta, _ = optimizers.rprop(Quadratic(), np.array([0.07]), _monitor(5), improved, 1.2, 0.5, 0.1, 50.0, 1e-6)
    assert theta[0] == pytest.approx(expected, abs=1e-12)


def test_rprop_steps_stay_within_their_bounds():
    theta, _ = optimizers.rprop(Quadratic(), np.array([1000.0]), _monitor(4), False, 10.0, 0.5, 1.0, 5.0, 1e-6)
    # steps 1, then min(10, 5) = 5, then 5: 1000 - 1 - 5 - 5
    assert theta[0] == pytest.approx(989.0, abs=1e-12)


class Rosenbrock(Quadratic):
    def __call__(self, theta, start=0, stop=None):
        return float(rosen(theta)), rosen_der(theta)


def test_lbfgs_finds_the_rosenbrock_minimum():
    # SciPy's Rosenbrock function has its minimum at (1, ..., 1) (SciPy documentation)
    monitor = Monitor(StoppingRules(epochs=500, gradient_threshold=1e-9, tolerance=1e-12, patience=10**6))
    theta, reason = optimizers.lbfgs(Rosenbrock(), np.array([-1.2, 1.0, 0.5]), monitor, 10, 1e-12)
    np.testing.assert_allclose(theta, [1.0, 1.0, 1.0], atol=1e-5)
    assert reason in ("gradient", "stalled")
    assert monitor.training_curve[-1] < 1e-10


def test_lbfgs_stops_at_the_epoch_limit_and_counts_iterations():
    monitor = _monitor(7)
    _, reason = optimizers.lbfgs(Rosenbrock(), np.array([-1.2, 1.0]), monitor, 10, 0.0)
    assert reason == "epochs"
    assert monitor.epochs == 7


class Rows:
    """f(theta) = mean over rows of (theta - row)^2 / 2, so each row pulls theta towards itself."""

    def __init__(self, values):
        self.values = np.array(values, dtype=float)
        self.n_rows = len(self.values)
        self.order = []

    def __call__(self, theta, start=0, stop=None):
        stop = self.n_rows if stop is None else stop
        part = self.values[start:stop]
        self.order.append(part.tolist())
        return float(np.mean((theta[0] - part) ** 2) / 2), np.array([np.mean(theta[0] - part)])

    def shuffle(self, rng):
        self.values = self.values[rng.permutation(self.n_rows)]


def test_per_row_gradient_descent_updates_after_every_row():
    # batch of 1 row, no momentum: theta <- theta - rate * (theta - row) for each row in turn
    objective = Rows([1.0, 3.0])
    theta, _ = optimizers.gradient_descent(objective, np.array([0.0]), _monitor(1), np.random.default_rng(5), 0.5, 0.0, 1)
    expected = 0.0
    for (row,) in objective.order:
        expected -= 0.5 * (expected - row)
    assert len(objective.order) == 2
    assert theta[0] == pytest.approx(expected, abs=1e-15)


def test_mini_batches_cover_every_row_once_per_epoch():
    objective = Rows([1.0, 2.0, 3.0, 4.0, 5.0])
    optimizers.gradient_descent(objective, np.array([0.0]), _monitor(2), np.random.default_rng(0), 0.1, 0.9, 2)
    first_epoch = objective.order[:3]
    assert [len(batch) for batch in first_epoch] == [2, 2, 1]
    assert sorted(sum(first_epoch, [])) == [1.0, 2.0, 3.0, 4.0, 5.0]


# --- the table of algorithms ------------------------------------------------------------

def test_each_table_entry_supplies_exactly_its_functions_arguments():
    for name, entry in optimizers.OPTIMIZERS.items():
        parameters = set(inspect.signature(entry.function).parameters)
        supplied = {"objective", "theta", "monitor", *entry.reads, *entry.fixed} | ({"rng"} if entry.mini_batches else set())
        assert supplied == parameters, name
        assert set(entry.reads.values()) <= set(SETTINGS_BY_NAME), name


def test_the_algorithm_setting_offers_the_tables_names():
    assert ALGORITHMS == ("auto", "gd", "rprop+", "irprop+", "lbfgs", "adam")
    assert SETTINGS_BY_NAME["algorithm"].choices == ("auto", *optimizers.OPTIMIZERS)


@pytest.mark.parametrize(
    "algorithm, direct",
    [
        ("gd", lambda q, t, m, rng, s: optimizers.gradient_descent(q, t, m, rng, 0.05, s["momentum"], 0)),
        ("rprop+", lambda q, t, m, rng, s: optimizers.rprop(q, t, m, False, 1.3, 0.4, 0.02, 0.7, 1e-5)),
        ("irprop+", lambda q, t, m, rng, s: optimizers.rprop(q, t, m, True, 1.3, 0.4, 0.02, 0.7, 1e-5)),
        ("lbfgs", lambda q, t, m, rng, s: optimizers.lbfgs(q, t, m, 3, s["tolerance"])),
        ("adam", lambda q, t, m, rng, s: optimizers.adam(q, t, m, rng, 0.05, 0.8, 0.99, 1e-7, 0)),
    ],
)
def test_run_feeds_each_setting_to_its_argument(algorithm, direct):
    # distinct values for every setting an algorithm reads, so a swapped pair would show in the result
    settings = resolve_settings({
        "rprop_increase": 1.3, "rprop_decrease": 0.4, "rprop_step": 0.02, "rprop_step_max": 0.7, "rprop_step_min": 1e-5,
        "adam_beta1": 0.8, "adam_beta2": 0.99, "adam_epsilon": 1e-7, "lbfgs_memory": 3, "momentum": 0.7,
    })
    settings.update(rate=0.05, batch=0)  # as plan_training resolves them
    start = np.array([0.9, -0.4, 0.3])
    theta, reason = optimizers.run(algorithm, Quadratic([1.0, 3.0, 0.5]), start, _monitor(6), np.random.default_rng(1), settings)
    expected, expected_reason = direct(Quadratic([1.0, 3.0, 0.5]), start, _monitor(6), np.random.default_rng(1), settings)
    np.testing.assert_array_equal(theta, expected)
    assert reason == expected_reason
    assert not np.array_equal(theta, start)
