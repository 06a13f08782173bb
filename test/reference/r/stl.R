#!/usr/bin/env Rscript
# Writes test/reference/testdata/stl_r.json: reference STL decompositions from R's stats::stl
# and the seasonal-strength figures forecast's nsdiffs uses.
#
#   Rscript test/reference/r/stl.R > test/reference/testdata/stl_r.json
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it), Debian's r-cran-forecast (8.20) and
# r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})

# The robust cases use series of odd length: for even n, R's stl takes the median of |R| from
# a partial sort asked for the order statistics n/2 + 1 and n/2 in that (descending) order, and
# in some outer passes returns a wrong n/2-th value (seen on nottem: the 111th of 240 in pass
# 12), so R's robustness weights are not the paper's. stl_statsmodels.py checks even n.
odd <- function(x) ts(as.numeric(x)[-length(x)], start = start(x), frequency = frequency(x))
datasets <- list(
  nottem = nottem, co2 = co2, AirPassengersLog = log(AirPassengers),
  UKgasLog = log(UKgas), USAccDeaths = USAccDeaths,
  nottemOdd = odd(nottem), co2Odd = odd(co2), AirPassengersLogOdd = odd(log(AirPassengers)),
  UKgasLogOdd = odd(log(UKgas))
)

# Decompositions: data, then the stl arguments as a list (R's defaults for the rest).
cases <- list(
  list("nottem", list(s.window = "periodic")),
  list("nottem", list(s.window = "periodic", robust = TRUE)),
  list("nottem", list(s.window = 7)),
  list("nottemOdd", list(s.window = 7, robust = TRUE)),
  list("co2", list(s.window = "periodic")),
  list("co2", list(s.window = 11)),
  list("co2Odd", list(s.window = 21, robust = TRUE)),
  list("co2", list(s.window = 13, s.degree = 1, t.window = 25, t.jump = 1, l.jump = 1)),
  list("AirPassengersLog", list(s.window = "periodic")),
  list("AirPassengersLog", list(s.window = 11)),
  list("AirPassengersLogOdd", list(s.window = 9, robust = TRUE)),
  list("AirPassengersLogOdd", list(s.window = "periodic", robust = TRUE)),
  list("AirPassengersLog", list(s.window = 7, t.degree = 0, inner = 3)),
  list("UKgasLog", list(s.window = 11)),
  list("UKgasLogOdd", list(s.window = 7, robust = TRUE, outer = 5)),
  list("USAccDeaths", list(s.window = 11))
)

deparse_args <- function(a) {
  paste(mapply(function(k, v) paste0(k, " = ", deparse(v)), names(a), a), collapse = ", ")
}

fits <- lapply(cases, function(cs) {
  x <- datasets[[cs[[1]]]]
  a <- cs[[2]]
  fit <- do.call(stl, c(list(x), a))
  ts <- fit$time.series
  list(
    data = cs[[1]],
    call = sprintf("stl(%s, %s)", cs[[1]], deparse_args(a)),
    periodic = identical(a$s.window, "periodic"),
    robust = isTRUE(a$robust), args = a,
    win = unname(fit$win), deg = unname(fit$deg), jump = unname(fit$jump),
    inner = fit$inner, outer = fit$outer,
    seasonal = as.numeric(ts[, "seasonal"]), trend = as.numeric(ts[, "trend"]),
    remainder = as.numeric(ts[, "remainder"]), weights = as.numeric(fit$weights)
  )
})

# Seasonal strength (forecast:::seas.heuristic, from mstl: stl with s.window = 11) and
# nsdiffs(x) with its default seasonal-strength test, on the R datasets with a season.
strength_data <- list(
  AirPassengersLog = log(AirPassengers), USAccDeaths = USAccDeaths, UKgasLog = log(UKgas),
  nottem = nottem, co2 = window(co2, start = 1990), austres = austres, ldeaths = ldeaths,
  JohnsonJohnsonLog = log(JohnsonJohnson), mdeaths = mdeaths, fdeaths = fdeaths,
  UKDriverDeaths = UKDriverDeaths, nottem4 = ts(as.numeric(nottem), frequency = 4),
  airmiles4 = ts(as.numeric(airmiles), frequency = 4), BJsales4 = ts(as.numeric(BJsales), frequency = 4),
  LakeHuron12 = ts(as.numeric(LakeHuron), frequency = 12)
)
strength <- lapply(names(strength_data), function(nm) {
  x <- strength_data[[nm]]
  list(data = nm, m = frequency(x), y = as.numeric(x),
       strength = forecast:::seas.heuristic(x), nsdiffs = nsdiffs(x))
})

series <- lapply(datasets, function(x) list(m = frequency(x), y = as.numeric(x)))

cat(toJSON(list(
  source = sprintf("%s, forecast %s", R.version.string, packageVersion("forecast")),
  series = series, fits = fits, strength = strength
), auto_unbox = TRUE, digits = NA, pretty = FALSE))
cat("\n")
