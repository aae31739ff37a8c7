"""Invented days to germination of seeds by tray and warmth, shared by the
time-outcome reference checks: some trays' trials end before the seed
sprouted (the time is then the days followed, `unsprouted` marks them).

The times are Weibull with shape `shape` and the mean e^η (scale
e^η / Γ(1 + 1/k)), drawn by numpy, never by Waypath."""
import numpy as np
from scipy.special import gammaln

TRAYS = ["clay", "peat", "sand"]


def germination(n=160, seed=11, shape=1.6):
    """The columns as the probes read them, and the tray codes, warmth and days."""
    rng = np.random.default_rng(seed)
    tray = rng.integers(0, 3, n)
    warmth = rng.uniform(12, 28, n)
    eta = 2.5 - 0.05 * (warmth - 20) + 0.25 * (tray == 1)
    event = np.exp(eta - gammaln(1 + 1 / shape)) * rng.weibull(shape, n)
    end = rng.uniform(10, 40, n)
    cut = event > end
    days = np.where(cut, end, event)
    cols = {
        "tray": {"category": {"codes": tray.tolist(), "levels": TRAYS}},
        "warmth": {"real": warmth.tolist()},
        "days": {"real": days.tolist()},
        "unsprouted": {"binary": cut.astype(int).tolist()},
    }
    return cols, tray, warmth, days


def linear_predictors(answer, tray, warmth, setting):
    """Each posterior draw's η (rows) per row of `tray` (columns) with warmth
    set to `setting` (centred at the table's mean warmth, the model's
    default), and the draws' parameters."""
    names = answer["names"]
    params = np.array(answer["params"])
    level = params[:, [names.index(f"tray[{t}]") for t in TRAYS]][:, tray]
    slope = params[:, names.index("warmth slope")][:, None]
    return level + slope * (setting - warmth.mean()), params
