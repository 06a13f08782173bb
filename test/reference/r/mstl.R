#!/usr/bin/env Rscript
# Writes test/reference/testdata/mstl_r.json: reference MSTL decompositions from R forecast's
# mstl and the forecasts of the seasonally adjusted series that forecast.mstl (stlf's engine)
# makes with ets, auto.arima and thetaf, the seasonal part re-added by repeating the last cycle.
#
#   Rscript test/reference/r/mstl.R > test/reference/testdata/mstl_r.json
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it), Debian's r-cran-forecast (8.20) and
# r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})

# Our own invented scenario (Fenwick Lane Provisions): hourly orders at a depot with a day and a
# week cycle, daily till receipts with a week and a year cycle, weekly pallet counts with a year
# cycle. Generated here with a fixed seed; the series are written into the fixture.
set.seed(20261204)
hours <- 0:(24 * 7 * 5 - 1)                     # five weeks
depotHourly <- 80 + 0.02 * hours + 25 * sin(2 * pi * hours / 24) +
  10 * cos(2 * pi * hours / 168) + 6 * (hours %% 168 >= 120) + rnorm(length(hours), sd = 4)
days <- 0:(3 * 365 - 1)                         # three years
tillDaily <- 500 + 0.1 * days + 60 * (days %% 7 %in% c(5, 6)) +
  80 * sin(2 * pi * days / 365.25) + rnorm(length(days), sd = 20)
weeks <- 0:259                                  # five years
palletsWeekly <- 300 + 0.3 * weeks + 40 * sin(2 * pi * weeks / 52.18) +
  15 * cos(4 * pi * weeks / 52.18) + rnorm(length(weeks), sd = 10)

cases <- list(
  list(name = "depotHourly", y = depotHourly, periods = c(24, 168), h = 48),
  list(name = "depotHourlyShort", y = depotHourly[1:300], periods = c(24, 168), h = 48),
  list(name = "tillDaily", y = tillDaily, periods = c(7, 365.25), h = 28),
  list(name = "palletsWeekly", y = palletsWeekly, periods = 52.18, h = 13),
  list(name = "taylor", y = as.numeric(taylor)[1:1344], periods = c(48, 336), h = 96),
  list(name = "AirPassengersLog", y = as.numeric(log(AirPassengers)), periods = 12, h = 24)
)

num <- function(x) as.numeric(x)

out <- lapply(cases, function(cs) {
  x <- if (length(cs$periods) > 1) msts(cs$y, seasonal.periods = cs$periods) else ts(cs$y, frequency = cs$periods)
  fit <- suppressWarnings(mstl(x))
  seascols <- grep("Seasonal", colnames(fit))
  etsf <- forecast(fit, method = "ets", h = cs$h)
  arf <- forecast(fit, method = "arima", h = cs$h)
  # thetaf on the adjusted series as a plain (frequency 1) series, plus the repeated last
  # cycles: forecast.mstl's naive forecast minus the last adjusted value is that seasonal part.
  sa <- num(seasadj(fit))
  lastseas <- num(forecast(fit, method = "naive", h = cs$h)$mean) - sa[length(sa)]
  thf <- list(mean = num(thetaf(ts(sa), h = cs$h)$mean) + lastseas)
  list(
    name = cs$name, y = cs$y, periods = I(cs$periods), h = cs$h,
    call = "fit <- mstl(x); forecast(fit, method = \"ets\" | \"arima\", h); thetaf(ts(seasadj(fit)), h) + seasonal part",
    kept = I(as.numeric(sub("Seasonal", "", colnames(fit)[seascols]))),
    trend = num(fit[, "Trend"]), remainder = num(fit[, "Remainder"]),
    seasonal = lapply(seascols, function(j) num(fit[, j])),
    adjusted = num(seasadj(fit)),
    ets = list(method = etsf$method, mean = num(etsf$mean)),
    arima = list(method = arf$method, mean = num(arf$mean)),
    theta = list(mean = thf$mean, seasonal = lastseas)
  )
})

cat(toJSON(list(
  source = "R forecast 8.20 mstl / forecast.mstl (Debian r-cran-forecast), R 4.2.2",
  cases = out), digits = NA, auto_unbox = TRUE, pretty = FALSE))
cat("\n")
