#!/usr/bin/env Rscript
# Writes test/reference/testdata/seasonstrength_r.json: the seasonality decision of histories
# between two and three seasons (2m < n < 3m) and the seasonally adjusted Theta forecast built
# on it, from R forecast 8.20, for weekly series (frequency 52) of 105 to 155 weeks:
#
#   strength  forecast:::seas.heuristic(ts(y, frequency = 52)), the STL seasonal strength
#             max(0, min(1, 1 - var(R) / var(R + S))) on mstl(x) (Wang, Smith & Hyndman 2006)
#   seasonal  nsdiffs(ts(y, frequency = 52), test = "seas") == 1, i.e. strength > 0.64
#   theta     thetaf's seasonal adjustment composed on that decision: when seasonal, the
#             classical multiplicative decompose(x, "multiplicative") indices, thetaf on the
#             adjusted series with frequency 1, and mean and fitted values multiplied back by
#             the indices as thetaf does internally (bounds: the adjusted-scale half-widths
#             around the reseasonalised mean, as thetaf's); otherwise thetaf(ts(y, frequency = 1)).
#
#   Rscript test/reference/r/seasonstrength.R > test/reference/testdata/seasonstrength_r.json
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it), Debian's r-cran-forecast (8.20) and
# r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})
if (as.character(packageVersion("forecast")) != "8.20") {
  stop("seasonstrength.R: expected forecast 8.20, found ", as.character(packageVersion("forecast")))
}
source("test/reference/r/thetaf_seasonal.R") # thetaf_seasonal(x): thetaf's own decision

# Our own invented scenario (Fenwick Lane Provisions): weekly case counts of items at depots,
# two to three years of history, with a trend, a yearly cycle of 52.18 weeks of varying size
# (none to strong), or a four-week peak before the year end, and noise. Fixed seed; the series
# are written into the fixture.
set.seed(16)
source("test/reference/r/weekly_series.R") # weekly(), peaked()

cases <- list(
  list(name = "oatsAshby", y = weekly(105, 200, 0.8, 0.25, 10)),
  list(name = "teaBrill", y = weekly(118, 400, 1.5, 0.20, 20)),
  list(name = "jamCorrie", y = weekly(130, 120, 0.3, 0.30, 6)),
  list(name = "honeyDunmore", y = weekly(130, 80, 0.4, 0.10, 8)),
  list(name = "ricesAshby", y = weekly(143, 300, 1.0, 0.00, 15)),
  list(name = "soupBrill", y = weekly(150, 250, -0.3, 0.15, 20)),
  list(name = "cardsCorrie", y = peaked(140, 50, 0.2, 45, 5)),
  list(name = "pastaDunmore", y = weekly(155, 500, 2.0, 0.12, 12)),
  list(name = "flourAshby", y = weekly(112, 150, 0.0, 0.05, 12)),
  list(name = "saltBrill", y = weekly(125, 90, 0.5, 0.40, 4))
)

num <- function(x) as.numeric(x)
h <- 13
m <- 52

out <- lapply(cases, function(cs) {
  x <- ts(cs$y, frequency = m)
  strength <- forecast:::seas.heuristic(x)
  D <- nsdiffs(x, test = "seas")
  seasonal <- D == 1
  idx <- rep(1, length(cs$y))
  ahead <- rep(1, h)
  adj <- cs$y
  if (seasonal) {
    decomp <- decompose(x, type = "multiplicative")
    if (any(abs(seasonal(decomp)) < 1e-04)) stop(cs$name, ": seasonal index close to zero")
    idx <- num(decomp$seasonal)
    ahead <- rep(tail(idx, m), trunc(1 + h / m))[1:h]
    adj <- num(seasadj(decomp))
  }
  th <- thetaf(ts(adj, frequency = 1), h = h, level = c(80, 95))
  mean <- num(th$mean) * ahead
  half <- function(b) num(b) - num(th$mean)
  list(
    name = cs$name, y = cs$y, m = m, h = h,
    strength = strength, seasonal = seasonal, thetafSeasonal = thetaf_seasonal(x),
    figure = num(decompose(x, type = "multiplicative")$figure),
    theta = list(
      call = "nsdiffs(ts(y, frequency = 52), test = \"seas\"); decompose(x, \"multiplicative\"); thetaf(ts(seasadj, frequency = 1), h, level = c(80, 95)) reseasonalised",
      alpha = num(th$model$alpha), fitted = num(th$fitted) * idx,
      mean = mean, lo80 = mean + half(th$lower[, 1]), hi80 = mean + half(th$upper[, 1]),
      lo95 = mean + half(th$lower[, 2]), hi95 = mean + half(th$upper[, 2]))
  )
})

cat(toJSON(list(
  source = "R forecast 8.20 nsdiffs(test = \"seas\") / seas.heuristic, decompose, thetaf (Debian r-cran-forecast), R 4.2.2",
  cases = out), digits = NA, auto_unbox = TRUE, pretty = FALSE))
cat("\n")
