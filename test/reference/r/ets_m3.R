#!/usr/bin/env Rscript
# Writes test/reference/testdata/ets_m3_r.csv: R's maximum-likelihood ETS fits of fixed forms on
# a spread sample of the M3 data (Makridakis & Hibon 2000, as in R's Mcomp, converted to CSV in
# ../shared/datasets/m3), for comparing our optimiser with R's (test/reference/ets_m3_test.go).
#
#   Rscript test/reference/r/ets_m3.R > test/reference/testdata/ets_m3_r.csv
#
# Sample: every 3rd series in the order of series.csv (N0001, N0004, ...; 1001 series). Forms:
# ETS(A,N,N) and ETS(A,Ad,N) on every sampled series, ETS(M,A,M) on those with frequency > 1;
# each is ets(ts(y, frequency = m), model = ..., damped = ...) with forecast 8.20's defaults
# (opt.crit = "lik", bounds = "both"). The file holds R's estimates and log likelihood, not the
# data: the test reads the series from $ALMANAC_M3_DIR or ../shared/datasets/m3.
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it) and Debian's r-cran-forecast (8.20).
# CI does not run R; the output is committed.
suppressPackageStartupMessages(library(forecast))
if (as.character(packageVersion("forecast")) != "8.20") {
  stop("ets_m3.R: expected forecast 8.20, found ", as.character(packageVersion("forecast")))
}
dir <- Sys.getenv("ALMANAC_M3_DIR", "../shared/datasets/m3")
info <- read.csv(file.path(dir, "series.csv"), stringsAsFactors = FALSE)
tr <- read.csv(file.path(dir, "train.csv"), stringsAsFactors = FALSE)
ys <- split(tr$value, tr$series)

g <- function(x) if (is.null(x) || length(x) == 0 || is.na(x)) "" else sprintf("%.12g", x)
cat(sprintf("# %s, forecast %s (Debian r-cran-forecast); made by test/reference/r/ets_m3.R.\n",
  R.version.string, packageVersion("forecast")))
cat("# loglik is R's fit$loglik (-0.5 times the criterion, no Gaussian constant); l0, b0 and the\n")
cat("# seeds (s1 first, space-separated) are fit$states[1, ]; cpu_ms is R's user+system time.\n")
cat("series,form,loglik,alpha,beta,gamma,phi,l0,b0,seeds,cpu_ms\n")
for (i in seq(1, nrow(info), by = 3)) {
  id <- info$series[i]
  m <- info$frequency[i]
  y <- ts(ys[[id]], frequency = m)
  forms <- c("ANN", "AAdN", if (m > 1) "MAM")
  for (f in forms) {
    damped <- f == "AAdN"
    t0 <- proc.time()
    fit <- ets(y, model = if (damped) "AAN" else f, damped = damped)
    el <- proc.time() - t0
    p <- fit$par
    s0 <- fit$states[1, ]
    seeds <- if (f == "MAM") paste(sprintf("%.12g", s0[grep("^s[0-9]+$", names(s0))]), collapse = " ") else ""
    cat(sprintf("%s,%s,%.15g,%s,%s,%s,%s,%s,%s,%s,%.0f\n", id, f, fit$loglik, g(p["alpha"]),
      g(p["beta"]), g(p["gamma"]), g(p["phi"]), g(s0["l"]), if ("b" %in% names(s0)) g(s0["b"]) else "",
      seeds, 1000 * (el[["user.self"]] + el[["sys.self"]])))
  }
}
