"""Fit the demo forest on the bundled (invented) orchard data and print its out-of-bag error."""

import numpy as np

from hedgerow import HonestForestRegressor
from hedgerow.datasets import load_orchard_demo


def main() -> None:
    X, y = load_orchard_demo()
    forest = HonestForestRegressor(n_estimators=500, random_state=0).fit(X, y)
    oob = forest.oob_predict()
    ok = ~np.isnan(oob)
    rmse = float(np.sqrt(np.mean((oob[ok] - y.to_numpy()[ok]) ** 2)))
    print(f"hedgerow demo: honest forest, {forest.n_estimators} trees in bags of "
          f"{forest.trees_per_bag_}, on {X.shape[0]} invented orchard rows")
    print(f"out-of-bag RMSE: {rmse:.2f} kg (sd of y: {y.std():.2f} kg)")


if __name__ == "__main__":
    main()
