#!/usr/bin/python3
"""Writes test/reference/testdata/stl_statsmodels.json: robust STL on series of even length.

    /usr/bin/python3 test/reference/stl_statsmodels.py > test/reference/testdata/stl_statsmodels.json

Needs Debian's python3-statsmodels (made with statsmodels 0.13.5). Its STL implements
Cleveland et al. (1990) with the robustness scale 6 * median|R| taken as the true median; R's
stl does not for even n (see r/stl.R), so these cases check the outer loop where the R
fixture cannot. The series are the R datasets of testdata/stl_r.json; every span, degree,
jump and iteration count is given explicitly (the values R's stl resolves for the same
s.window, listed beside each case).
"""
import json
import os
import sys

import numpy as np
import statsmodels
from statsmodels.tsa.seasonal import STL

HERE = os.path.dirname(os.path.abspath(__file__))

# data, (seasonal, trend, low_pass), degrees, jumps, inner, outer
CASES = [
    ("nottem", (7, 23, 13), (0, 1, 1), (1, 3, 2), 1, 15),  # R: stl(nottem, s.window = 7, robust = TRUE)
    ("co2", (21, 21, 13), (0, 1, 1), (3, 3, 2), 1, 15),  # R: stl(co2, s.window = 21, robust = TRUE)
    ("AirPassengersLog", (9, 23, 13), (0, 1, 1), (1, 3, 2), 1, 15),  # R: s.window = 9, robust = TRUE
    ("UKgasLog", (7, 9, 5), (0, 1, 1), (1, 1, 1), 1, 5),  # R: s.window = 7, robust = TRUE, outer = 5
    ("USAccDeaths", (11, 21, 13), (1, 1, 0), (2, 3, 2), 2, 6),  # other degrees, inner 2
]


def main():
    with open(os.path.join(HERE, "testdata", "stl_r.json")) as f:
        series = json.load(f)["series"]
    fits = []
    for data, win, deg, jump, inner, outer in CASES:
        s = series[data]
        x = np.asarray(s["y"], dtype=float)
        res = STL(x, period=s["m"], seasonal=win[0], trend=win[1], low_pass=win[2],
                  seasonal_deg=deg[0], trend_deg=deg[1], low_pass_deg=deg[2],
                  seasonal_jump=jump[0], trend_jump=jump[1], low_pass_jump=jump[2],
                  robust=True).fit(inner_iter=inner, outer_iter=outer)
        call = ("STL(%s, period=%d, seasonal=%d, trend=%d, low_pass=%d, seasonal_deg=%d, "
                "trend_deg=%d, low_pass_deg=%d, seasonal_jump=%d, trend_jump=%d, "
                "low_pass_jump=%d, robust=True).fit(inner_iter=%d, outer_iter=%d)"
                % ((data, s["m"]) + win + deg + jump + (inner, outer)))
        fits.append({
            "data": data, "call": call, "win": win, "deg": deg, "jump": jump,
            "inner": inner, "outer": outer,
            "seasonal": res.seasonal.tolist(), "trend": res.trend.tolist(),
            "remainder": res.resid.tolist(), "weights": res.weights.tolist(),
        })
    json.dump({"source": "statsmodels %s" % statsmodels.__version__, "fits": fits},
              fp=sys.stdout, separators=(",", ":"))
    print()


if __name__ == "__main__":
    main()
