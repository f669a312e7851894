"""Reference figures computed outside Twofold, shared by tests in several folders."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

WOUND = Path(__file__).resolve().parents[1] / "sample_studies" / "wound_infection_synthetic.csv"


def wound_top_influential_rows(k: int = 10):
    """File rows (1-based) and Cook's distances of the k most influential records of the wound
    sample's model age + bmi + diabetes.

    Outside reference: statsmodels GLM (binomial) ``get_influence`` on the design built with pandas.
    """
    import statsmodels.api as sm

    frame = pd.read_csv(WOUND)
    X = sm.add_constant(pd.DataFrame({"age": frame.age, "bmi": frame.bmi,
                                      "diabetes": (frame.diabetes == "yes").astype(float)}))
    glm = sm.GLM((frame.infection == "yes").astype(float), X, family=sm.families.Binomial()).fit()
    cooks = glm.get_influence().cooks_distance[0]
    order = np.argsort(-cooks, kind="stable")
    assert cooks[order[k - 1]] > cooks[order[k]]  # no tie at the edge of the top k
    return [int(i) + 1 for i in order[:k]], cooks[order[:k]]  # row 1 is the first record of the file
