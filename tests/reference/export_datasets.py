#!/usr/bin/env python3
"""Converts the open datasets that the scikit-learn package (PyPI) ships in its
`sklearn/datasets/data/` folder into sinew CSV files under tests/data/.

    export_datasets.py [OUT_DIR]       (default: tests/data next to this folder)

Sources (see tests/data/NOTICE.md for citations and licences):

- `iris.csv`: first line `150,4,setosa,versicolor,virginica` (samples, features, class
  names), then 4 measurements and a class index per line;
- `breast_cancer.csv`: first line `569,30,malignant,benign`, then 30 features and a class
  index (0 malignant, 1 benign) per line;
- `digits.csv.gz`: no header; 64 pixel counts (0..16) and the digit per line.

Output layout (sinew's CSV, see `sinew::data`): a header, the input columns, then a `label`
column. Iris and Breast Cancer labels are the class names of the source's first line, digits
labels the digit (a class index). Feature names are the ones scikit-learn's loaders give
(`load_iris().feature_names` etc.), lower-cased with every run of other characters replaced by
one `_`. Every number is copied as the text of the source file, so no value is re-rounded; the
script checks that the values it writes equal what scikit-learn's own loaders return.
"""

import csv
import gzip
import io
import os
import re
import sys
from importlib import resources

import numpy as np
from sklearn import datasets


def snake(name):
    return re.sub(r"[^a-z0-9]+", "_", name.lower()).strip("_")


def read_counted(text):
    """A file whose first line is `samples,features,class names...`."""
    rows = list(csv.reader(io.StringIO(text)))
    head = rows[0]
    n, width = int(head[0]), int(head[1])
    classes = head[2:]
    body = [r for r in rows[1:] if r]
    assert len(body) == n, f"{len(body)} samples, header says {n}"
    assert all(len(r) == width + 1 for r in body)
    return classes, [r[:width] for r in body], [int(r[width]) for r in body]


def write(path, names, features, labels):
    with open(path, "w", encoding="utf-8", newline="\n") as f:
        f.write(",".join(names + ["label"]) + "\n")
        for x, y in zip(features, labels):
            f.write(",".join(x + [y]) + "\n")


def check_against_loader(features, labels, loader):
    bunch = loader()
    assert np.array_equal(np.asarray(features, dtype=np.float64), bunch.data)
    assert np.array_equal(np.asarray(labels), bunch.target)
    return [snake(n) for n in bunch.feature_names]


def main(argv):
    here = os.path.dirname(os.path.abspath(__file__))
    out = argv[1] if len(argv) > 1 else os.path.join(here, "..", "data")
    os.makedirs(out, exist_ok=True)
    data = resources.files("sklearn.datasets") / "data"

    classes, x, y = read_counted((data / "iris.csv").read_text(encoding="utf-8"))
    names = check_against_loader(x, y, datasets.load_iris)
    write(os.path.join(out, "iris.csv"), names, x, [classes[k] for k in y])

    classes, x, y = read_counted((data / "breast_cancer.csv").read_text(encoding="utf-8"))
    names = check_against_loader(x, y, datasets.load_breast_cancer)
    write(os.path.join(out, "breast_cancer.csv"), names, x, [classes[k] for k in y])

    text = gzip.decompress((data / "digits.csv.gz").read_bytes()).decode("utf-8")
    rows = [r for r in csv.reader(io.StringIO(text)) if r]
    assert all(len(r) == 65 for r in rows)
    # Pixel counts and digits are whole numbers; parsing through float accepts "3" and "3.0".
    x = [[str(int(float(v))) for v in r[:64]] for r in rows]
    y = [int(float(r[64])) for r in rows]
    names = check_against_loader(x, y, datasets.load_digits)
    write(os.path.join(out, "digits.csv"), names, x, [str(k) for k in y])

    print(f"wrote iris.csv, breast_cancer.csv and digits.csv to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
