#!/usr/bin/env Rscript
# Writes test/reference/testdata/weekly_r.json: references for weekly (frequency 52, yearly
# cycle 52.18) and daily (frequency 7, cycles 7 and 365.25) series, the data of demand
# portfolios, from R forecast 8.20: thetaf, ets, snaive on ts(y, frequency = m), auto.arima
# on the daily ones, and mstl / forecast.mstl (stlf's engine) on msts(y, seasonal.periods =
# periods).
#
#   Rscript test/reference/r/weekly.R > test/reference/testdata/weekly_r.json
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it), Debian's r-cran-forecast (8.20) and
# r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})
if (as.character(packageVersion("forecast")) != "8.20") {
  stop("weekly.R: expected forecast 8.20, found ", as.character(packageVersion("forecast")))
}

# Our own invented scenario (Fenwick Lane Provisions): weekly case counts of items at depots
# with a trend, a yearly cycle and noise, at lengths on both sides of the Theta seasonality
# test's minimum (R's thetaf: n > 2m; ours: the autocorrelation test from n >= 3m, the STL seasonal strength for 2m < n < 3m; cardsHarrogate, 120 weeks with a
# four-week peak before the year end, is seasonal by thetaf's test), and daily till receipts with a week cycle
# (one also with a year cycle). Generated here with a fixed seed; the series are written into
# the fixture.
set.seed(20261204)
source("test/reference/r/weekly_series.R") # weekly(), peaked()
daily <- function(n, level, slope, weekend, yearAmp, sd) {
  t <- 0:(n - 1)
  round(level + slope * t + weekend * (t %% 7 %in% c(5, 6)) - 0.3 * weekend * (t %% 7 == 0) +
    yearAmp * sin(2 * pi * t / 365.25) + rnorm(n, sd = sd), 2)
}

cases <- list(
  list(name = "oatsBristol", y = weekly(208, 200, 0.4, 0.20, 12), m = 52, periods = 52.18, h = 13),
  list(name = "teaLeeds", y = weekly(312, 500, -0.2, 0.10, 25), m = 52, periods = 52.18, h = 13),
  list(name = "jamYork", y = weekly(156, 120, 0.1, 0.25, 8), m = 52, periods = 52.18, h = 13),
  list(name = "honeyBath", y = weekly(130, 80, 0.15, 0.30, 5), m = 52, periods = 52.18, h = 13),
  list(name = "cardsHarrogate", y = peaked(120, 50, 0.05, 45, 5), m = 52, periods = 52.18, h = 13),
  list(name = "flourDerby", y = weekly(104, 300, 0.5, 0.15, 15), m = 52, periods = 52.18, h = 13),
  list(name = "breadBristol", y = daily(140, 400, 0.5, 80, 0, 20), m = 7, periods = c(7, 365.25), h = 14),
  list(name = "milkLeeds", y = daily(900, 600, 0.1, 90, 70, 25), m = 7, periods = c(7, 365.25), h = 14)
)

num <- function(x) if (is.null(x)) NULL else as.numeric(x)
band <- function(fc) list(mean = num(fc$mean), lo80 = num(fc$lower[, 1]), hi80 = num(fc$upper[, 1]),
                          lo95 = num(fc$lower[, 2]), hi95 = num(fc$upper[, 2]))

source("test/reference/r/thetaf_seasonal.R") # thetaf_seasonal(x): thetaf's seasonality decision

etsRef <- function(x, h) {
  fit <- suppressWarnings(ets(x))
  fc <- forecast(fit, h = h, level = c(80, 95))
  comp <- fit$components
  s0 <- fit$states[1, ]
  c(list(
    method = fit$method,
    error = comp[1], trend = if (comp[2] == "A" && comp[4] == "TRUE") "Ad" else comp[2], season = comp[3],
    alpha = num(fit$par["alpha"]), beta = if (is.na(fit$par["beta"])) 0 else num(fit$par["beta"]),
    gamma = if (is.na(fit$par["gamma"])) 0 else num(fit$par["gamma"]),
    phi = if (is.na(fit$par["phi"])) 1 else num(fit$par["phi"]),
    level = num(s0["l"]), slope = if ("b" %in% names(s0)) num(s0["b"]) else 0,
    seasonal = I(num(s0[grep("^s[0-9]+$", names(s0))])),
    loglik = fit$loglik, aicc = fit$aicc, sigma2 = fit$sigma2), band(fc))
}

# auto.arima(ts(y, frequency = m)) for the daily series (m = 7) in the shape of arima_r.json's
# fits. Not for the weekly ones: our ARIMA has no seasonal terms above 24 (R's auto.arima
# picks D = 1 at lag 52 on all but the 104-week series, and takes 91 s on teaLeeds).
arimaRef <- function(x, h) {
  fit <- auto.arima(x)
  fc <- forecast(fit, h = h, level = c(80, 95))
  a <- fit$arma # p, q, P, Q, m, d, D
  cf <- fit$coef
  get <- function(prefix, k) if (k == 0) numeric(0) else unname(cf[paste0(prefix, seq_len(k))])
  cst <- if ("intercept" %in% names(cf)) cf[["intercept"]] else if ("drift" %in% names(cf)) cf[["drift"]] else NULL
  list(call = "auto.arima(ts(y, frequency = m)); forecast(fit, h, level = c(80, 95))",
       order = I(c(a[1], a[6], a[2])), seasonal = I(c(a[3], a[7], a[4])), constant = !is.null(cst),
       ar = I(get("ar", a[1])), ma = I(get("ma", a[2])), sar = I(get("sar", a[3])), sma = I(get("sma", a[4])),
       const = if (is.null(cst)) 0 else cst,
       loglik = fit$loglik, aicc = fit$aicc, sigma2 = fit$sigma2,
       sigma2core = if (a[6] + a[7] == 0) fit$sigma2 else
         sum(residuals(fit)[-seq_len(a[6] + a[5] * a[7])]^2) / (fit$nobs - length(fit$coef[fit$mask])),
       mean = num(fc$mean), lo80 = num(fc$lower[, 1]), hi80 = num(fc$upper[, 1]),
       lo95 = num(fc$lower[, 2]), hi95 = num(fc$upper[, 2]))
}

out <- lapply(cases, function(cs) {
  x <- ts(cs$y, frequency = cs$m)
  n <- length(cs$y)
  th <- thetaf(x, h = cs$h, level = c(80, 95))
  xm <- msts(cs$y, seasonal.periods = cs$periods)
  # stl needs more than two cycles of the shortest period: R stops on flourDerby (104 weeks),
  # and the fixture records no decomposition for it.
  fit <- tryCatch(suppressWarnings(mstl(xm)), error = function(e) NULL)
  if (!is.null(fit)) {
    seascols <- grep("Seasonal", colnames(fit))
    stl <- suppressWarnings(stlf(xm, h = cs$h, level = c(80, 95)))
    arf <- forecast(fit, method = "arima", h = cs$h)
    sa <- num(seasadj(fit))
    lastseas <- num(forecast(fit, method = "naive", h = cs$h)$mean) - sa[length(sa)]
  }
  list(
    name = cs$name, y = cs$y, m = cs$m, h = cs$h,
    theta = c(list(call = "thetaf(ts(y, frequency = m), h, level = c(80, 95))",
                   alpha = num(th$model$alpha), seasonal = thetaf_seasonal(x), fitted = num(th$fitted)), band(th)),
    figure = if (n >= 2 * cs$m) num(decompose(x, type = "multiplicative")$figure) else NULL,
    snaive = c(list(call = "snaive(ts(y, frequency = m), h, level = c(80, 95))"), band(snaive(x, h = cs$h, level = c(80, 95)))),
    ets = c(list(call = "ets(ts(y, frequency = m)); forecast(fit, h, level = c(80, 95))"), etsRef(x, cs$h)),
    arima = if (cs$m <= 24) arimaRef(x, cs$h) else NULL,
    mstl = if (is.null(fit)) NULL else list(
      name = cs$name, y = cs$y, periods = I(cs$periods), h = cs$h,
      call = "stlf(msts(y, seasonal.periods = periods), h) = forecast(mstl(x), method = \"ets\"); forecast(mstl(x), method = \"arima\"); thetaf(ts(seasadj(fit)), h) + seasonal part",
      kept = I(as.numeric(sub("Seasonal", "", colnames(fit)[seascols]))),
      trend = num(fit[, "Trend"]), remainder = num(fit[, "Remainder"]),
      seasonal = lapply(seascols, function(j) num(fit[, j])),
      adjusted = sa,
      ets = list(method = stl$method, mean = num(stl$mean), loglik = stl$model$loglik),
      arima = list(method = arf$method, mean = num(arf$mean)),
      theta = list(mean = num(thetaf(ts(sa), h = cs$h)$mean) + lastseas, seasonal = lastseas)
    )
  )
})

cat(toJSON(list(
  source = "R forecast 8.20 thetaf, ets, snaive, mstl, stlf / forecast.mstl (Debian r-cran-forecast), R 4.2.2",
  cases = out), digits = NA, auto_unbox = TRUE, pretty = FALSE))
cat("\n")
