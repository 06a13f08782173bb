#!/usr/bin/env Rscript
# Writes test/reference/testdata/fourier_arima_r.json: dynamic harmonic regression references
# from R forecast's fourier and auto.arima with Fourier regressors, on the series of
# mstl_r.json (run r/mstl.R first).
#
#   Rscript test/reference/r/fourier_arima.R > test/reference/testdata/fourier_arima_r.json
#
# Needs R (made with R 4.2.2 as Debian bookworm ships it), Debian's r-cran-forecast (8.20) and
# r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})

ref <- fromJSON("test/reference/testdata/mstl_r.json", simplifyVector = TRUE)$cases
maxHarmonics <- 12

# The number of pairs per period, chosen as trainer/models' FamilyFourierARIMA does: AICc of the
# least-squares regression of y on an intercept and the terms (Hurvich & Tsai 1989), periods
# shortest first, each K from 0 to min(floor(p/2), 12) with the others at their current choice.
aicc <- function(y, X) {
  fit <- if (is.null(X) || NCOL(X) == 0) lm(y ~ 1) else lm(y ~ X)
  n <- length(y); k <- length(coef(fit)); rss <- sum(residuals(fit)^2)
  n * log(rss / n) + 2 * (k + 1) + 2 * (k + 1) * (k + 2) / (n - k - 2)
}
terms <- function(x, periods, K) {
  keep <- K > 0
  if (!any(keep)) return(NULL)
  xx <- if (sum(keep) > 1) msts(as.numeric(x), seasonal.periods = periods[keep]) else ts(as.numeric(x), frequency = periods[keep])
  fourier(xx, K = K[keep])
}
chooseK <- function(y, periods) {
  K <- rep(0L, length(periods))
  for (i in seq_along(periods)) {
    best <- Inf; bestK <- 0L
    for (k in 0:min(floor(periods[i] / 2), maxHarmonics)) {
      K[i] <- k
      a <- aicc(y, terms(y, periods, K))
      if (a < best) { best <- a; bestK <- k }
    }
    K[i] <- bestK
  }
  K
}

cases <- list()
for (i in seq_len(nrow(ref))) {
  y <- ref$y[[i]]; n <- length(y); h <- ref$h[i]
  periods <- ref$periods[[i]]
  periods <- periods[n >= 2 * periods]
  if (ref$name[i] %in% c("AirPassengersLog", "depotHourlyShort")) next
  K <- chooseK(y, periods)
  keep <- K > 0
  xx <- if (sum(keep) > 1) msts(y, seasonal.periods = periods[keep]) else ts(y, frequency = periods[keep])
  X <- fourier(xx, K = K[keep])
  Xf <- fourier(xx, K = K[keep], h = h)
  ols <- lm(y ~ X)
  fit <- auto.arima(y, xreg = X, seasonal = FALSE)
  fc <- forecast(fit, xreg = Xf, h = h)
  cases[[length(cases) + 1]] <- list(
    name = ref$name[i], periods = I(periods), K = I(K), h = h,
    call = "auto.arima(y, xreg = fourier(msts(y, seasonal.periods = periods), K = K), seasonal = FALSE); forecast(fit, xreg = fourier(..., h = h))",
    terms = I(colnames(X)), X1 = I(as.numeric(X[1, ])), Xh = I(as.numeric(Xf[h, ])),
    olsCoef = I(as.numeric(coef(ols))),
    arima = list(order = I(as.integer(arimaorder(fit))), coef = as.list(coef(fit)),
      mean = as.numeric(fc$mean))
  )
}

cat(toJSON(list(
  source = "R forecast 8.20 fourier / auto.arima with xreg (Debian r-cran-forecast), R 4.2.2",
  cases = cases), digits = NA, auto_unbox = TRUE, pretty = FALSE))
cat("\n")
