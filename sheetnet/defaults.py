"""The numbers behind the defaults and the auto choices, in one place.

`sheetnet.settings` declares the settings' defaults with these and formats
their help texts (and so the README's settings table) from them;
`sheetnet.training.plan_training` resolves the auto choices with them; the
stopping rules default to them. Change a number here and every one follows.
"""

from __future__ import annotations

MIN_ROWS = 4  # fewest rows `fit` trains on
DEFAULT_HIDDEN = (16,)  # hidden layers when `fit` is not given any (nor is TRAIN, at every door); measured against 4 below
NARROW_HIDDEN = (4,)  # ... and on a small table the folds weigh DEFAULT_HIDDEN, this narrower layer and none

# --- stopping rules (the defaults of the settings of the same names) ---------------------
EPOCHS = 1000
TARGET_LOSS = 0.0  # off
GRADIENT_THRESHOLD = 1e-6
TOLERANCE = 1e-6
PATIENCE = 10

# --- the auto choices, by the number of training rows ------------------------------------
# re-measured by `python tests/benchmarks/vs_reference.py --algorithms` (one seed, a hidden layer of 16): at 37,500 and
# 75,000 training rows Adam was 2.1-2.2x faster than L-BFGS on make_friedman1 at the same R^2 (0.958), while on
# make_classification L-BFGS took 1.1x Adam's time at 37,500 (accuracy 0.989 against 0.986) and 0.27x at 75,000
# (0.986 against 0.988); at 15,000 L-BFGS matched or beat Adam. Neither wins both above the switch.
LBFGS_ROW_LIMIT = 50_000  # algorithm auto: L-BFGS below this many training rows, Adam from here on
FLOAT32_ROW_LIMIT = 1_000  # precision auto: float32 from here on
VALIDATION_ROW_LIMIT = 100  # validation_share none: AUTO_VALIDATION_SHARE from here on, else 0
AUTO_VALIDATION_SHARE = 0.15
ADAM_BATCH_ROWS = 512  # batch none for adam (gd: all rows)
GD_RATE = 0.1  # rate none for gd
ADAM_PAPER_RATE = 0.001  # Kingma & Ba 2015, Algorithm 1
# the paper's 0.001 reached the same holdout quality in about 3x the epochs on 100,000 rows
ADAM_RATE = 0.005  # rate none for adam
AUTO_RATES = {"gd": GD_RATE, "adam": ADAM_RATE}  # algorithms without a rate (Rprop, L-BFGS) get 0

# --- weight decay: chosen by inner cross-validation on small tables -------------------------
TUNING_ROW_LIMIT = 5_000  # decay none: chosen by TUNING_FOLDS-fold cross-validation below this many training rows
TUNING_MIN_ROWS = 30  # ... and from this many: fewer rows leave folds too small to judge a decay by
TUNING_FOLDS = 3
DECAY_CHOICES = (0.1, 1.0, 10.0)  # 0.01 and 100 were tried too: 0.01 scored as 0.1 and 100 never won
TINY_TABLE_DECAY = 1e-4  # decay none below TUNING_MIN_ROWS: a handful of rows is usually meant to be reproduced
# 1 beat the former 1e-4 on every benchmark table of 7,500 training rows or more (make_classification
# 10k accuracy 0.962 against 0.954); the penalty is spread over all N training rows, so it fades as N grows
DEFAULT_DECAY = 1.0  # decay none from TUNING_ROW_LIMIT training rows on
