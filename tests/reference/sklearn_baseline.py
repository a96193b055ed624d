#!/usr/bin/env python3
"""Reference accuracies for the dataset tests: scikit-learn's MLPClassifier with the same
hidden layer, activation and L2 penalty as each spec, on the same train/test split as sinew.

    sklearn_baseline.py [OUT_DIR]      (default: tests/reference/baselines)

For each dataset it

1. reads the sinew CSV of tests/data/ and the spec of tests/reference/specs/ (the hidden width
   and activation, the l2 lambda and the class names are taken from the spec);
2. reproduces `sinew::data::split(ds, FRACTION, SEED)` from its documented algorithm
   (stratified; per-class shares rounded down, the remaining samples to the largest
   remainders; one SplitMix64 stream shuffling each class by Fisher-Yates, validation first);
   the Rust test checks that sinew's split yields exactly these test indices;
3. standardizes with the training split's mean and population standard deviation (a constant
   feature gets 1), as sinew's `standardize` does;
4. trains MLPClassifier(hidden_layer_sizes=(width,), activation, solver="lbfgs", alpha=lambda,
   max_iter=ITERATIONS) for random_state 0..9 and records each test accuracy.

scikit-learn's objective is sinew's: mean log-loss plus alpha / (2 n) * sum of squared
weights (biases not penalised), with a softmax output for several classes and one logistic
unit for two.
"""

import json
import os
import sys
import warnings

import numpy as np
import sklearn
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier

# name, data file, spec file, test fraction, split seed, L-BFGS iterations.
DATASETS = [
    ("iris", "iris.csv", "iris.sinew", 0.3, 2024, 200),
    ("breast_cancer", "breast_cancer.csv", "breast_cancer.sinew", 0.3, 2024, 200),
    ("digits", "digits.csv", "digits.sinew", 0.3, 2024, 200),
]
SEEDS = range(10)
MASK = (1 << 64) - 1


class SplitMix64:
    """SplitMix64 (Steele, Lea and Flood 2014), as documented in sinew_runtime::rng."""

    def __init__(self, seed):
        self.state = seed & MASK

    def next_u64(self):
        self.state = (self.state + 0x9E3779B97F4A7C15) & MASK
        z = self.state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
        return z ^ (z >> 31)


def shuffle(v, rng):
    for i in range(len(v) - 1, 0, -1):
        j = rng.next_u64() % (i + 1)
        v[i], v[j] = v[j], v[i]


def split_indices(labels, fraction, seed):
    """Test (validation) indices of sinew's stratified split, in file order."""
    n = len(labels)
    rng = SplitMix64(seed)
    total = int(np.floor(fraction * n + 0.5))
    k = max(labels) + 1
    groups = [[i for i, c in enumerate(labels) if c == g] for g in range(k)]
    shares = [fraction * len(g) for g in groups]
    counts = [int(np.floor(s)) for s in shares]
    order = sorted(range(k), key=lambda c: (-(shares[c] - np.floor(shares[c])), c))
    missing = max(total - sum(counts), 0)
    for c in (order * 2)[: 2 * k]:
        if missing == 0:
            break
        if counts[c] < len(groups[c]):
            counts[c] += 1
            missing -= 1
    valid = set()
    for group, count in zip(groups, counts):
        shuffle(group, rng)
        valid.update(group[:count])
    return sorted(valid)


def read_spec(path):
    spec = {"classes": None}
    with open(path, encoding="utf-8") as f:
        for line in f:
            words = line.split("#")[0].replace(",", " ").split()
            if not words:
                continue
            if words[0] == "layer":
                assert "hidden" not in spec, "one hidden layer expected"
                spec["hidden"] = int(words[2])
                spec["activation"] = words[3]
            elif words[0] == "output" and "classes" in words:
                spec["classes"] = words[words.index("classes") + 1 :]
            elif words[0] == "penalty":
                assert words[1] == "l2", "an l2 penalty expected"
                spec["lambda"] = float(words[2])
    return spec


def read_csv(path, classes):
    with open(path, encoding="utf-8") as f:
        header = f.readline().strip().split(",")
        assert header[-1] == "label"
        x, y = [], []
        for line in f:
            cells = line.strip().split(",")
            if len(cells) < 2:
                continue
            x.append([float(v) for v in cells[:-1]])
            y.append(classes.index(cells[-1]) if classes else int(cells[-1]))
    return np.asarray(x), y


def standardize(train, test):
    mean = train.mean(axis=0)
    std = train.std(axis=0)
    std[std == 0.0] = 1.0
    return (train - mean) / std, (test - mean) / std


def main(argv):
    here = os.path.dirname(os.path.abspath(__file__))
    out = argv[1] if len(argv) > 1 else os.path.join(here, "baselines")
    os.makedirs(out, exist_ok=True)
    for name, data_file, spec_file, fraction, seed, iterations in DATASETS:
        spec = read_spec(os.path.join(here, "specs", spec_file))
        x, y = read_csv(os.path.join(here, "..", "data", data_file), spec["classes"])
        test = split_indices(y, fraction, seed)
        in_test = np.zeros(len(y), dtype=bool)
        in_test[test] = True
        y = np.asarray(y)
        x_train, x_test = standardize(x[~in_test], x[in_test])
        accuracies = []
        for s in SEEDS:
            clf = MLPClassifier(
                hidden_layer_sizes=(spec["hidden"],),
                activation=spec["activation"],
                solver="lbfgs",
                alpha=spec["lambda"],
                max_iter=iterations,
                random_state=s,
            )
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ConvergenceWarning)
                clf.fit(x_train, y[~in_test])
            accuracies.append(float(np.mean(clf.predict(x_test) == y[in_test])))
        result = {
            "dataset": name,
            "data": f"tests/data/{data_file}",
            "spec": f"tests/reference/specs/{spec_file}",
            "split": {
                "fraction": fraction,
                "seed": seed,
                "samples": len(y),
                "test_samples": len(test),
                "test_indices": test,
            },
            "sklearn": {
                "version": sklearn.__version__,
                "estimator": (
                    f"MLPClassifier(hidden_layer_sizes=({spec['hidden']},), "
                    f"activation={spec['activation']!r}, solver='lbfgs', alpha={spec['lambda']!r}, "
                    f"max_iter={iterations}, random_state=0..{len(SEEDS) - 1})"
                ),
                "test_accuracy": accuracies,
                "mean_test_accuracy": float(np.mean(accuracies)),
                "min_test_accuracy": float(np.min(accuracies)),
                "max_test_accuracy": float(np.max(accuracies)),
            },
        }
        path = os.path.join(out, f"{name}.json")
        with open(path, "w", encoding="utf-8", newline="\n") as f:
            json.dump(result, f, indent=2)
            f.write("\n")
        print(
            f"{name}: {len(test)} test samples; sklearn test accuracy mean "
            f"{result['sklearn']['mean_test_accuracy']:.4f} (min {min(accuracies):.4f}, "
            f"max {max(accuracies):.4f})"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
