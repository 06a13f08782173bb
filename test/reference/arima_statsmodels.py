#!/usr/bin/python3
"""Writes test/reference/testdata/arima_statsmodels.json: a second opinion on the ARIMA fits.

    /usr/bin/python3 test/reference/arima_statsmodels.py > test/reference/testdata/arima_statsmodels.json

Needs Debian's python3-statsmodels (made with statsmodels 0.13.5). It fits the fixed orders of
testdata/arima_r.json with SARIMAX(simple_differencing=True), which differences first and
evaluates the exact likelihood of the differenced series from the stationary initial state
(concentrated over sigma^2 with concentrate_scale=True),
the same likelihood as trainer/models; a constant is SARIMAX's trend="c", written here as the
mean of the differenced series, c / phi(1).
"""
import json
import os
import warnings

import numpy as np
import statsmodels
from statsmodels.tsa.statespace.sarimax import SARIMAX

here = os.path.dirname(os.path.abspath(__file__))
ref = json.load(open(os.path.join(here, "testdata", "arima_r.json")))
warnings.simplefilter("ignore")


def as_list(v):
    return v if isinstance(v, list) else [v]


out = {"source": "statsmodels %s SARIMAX (Debian python3-statsmodels)" % statsmodels.__version__, "fits": []}
for f in ref["fits"]:
    if f["auto"]:
        continue
    s = ref["series"][f["data"]]
    m = max(1, int(round(s["m"])))
    p, d, q = f["order"]
    P, D, Q = f["seasonal"]
    mod = SARIMAX(np.asarray(s["y"]), order=(p, d, q), seasonal_order=(P, D, Q, m if P + D + Q > 0 else 0),
                  trend="c" if f["constant"] else "n", simple_differencing=True,
                  enforce_stationarity=True, enforce_invertibility=True, concentrate_scale=True)
    res = mod.fit(disp=False, maxiter=500)
    names = mod.param_names
    par = dict(zip(names, res.params))
    get = lambda prefix, k: [par["%s.L%d" % (prefix, (i + 1) * (m if prefix.startswith("ar.S") or prefix.startswith("ma.S") else 1))] for i in range(k)]
    ar, ma, sar, sma = get("ar", p), get("ma", q), get("ar.S", P), get("ma.S", Q)
    const = 0.0
    if f["constant"]:
        phi1 = (1 - sum(ar)) * (1 - sum(sar))
        const = par["intercept"] / phi1
        if D == 1:
            const /= m  # drift per time step
    out["fits"].append({"data": f["data"], "call": "SARIMAX(y, order=(%d,%d,%d), seasonal_order=(%d,%d,%d,%d), trend=%r, simple_differencing=True, concentrate_scale=True)" % (p, d, q, P, D, Q, m, "c" if f["constant"] else "n"),
                        "order": [p, d, q], "seasonal": [P, D, Q], "constant": f["constant"],
                        "ar": ar, "ma": ma, "sar": sar, "sma": sma, "const": const, "loglik": res.llf})
print(json.dumps(out))
