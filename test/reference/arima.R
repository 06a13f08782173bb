#!/usr/bin/env Rscript
# Writes test/reference/testdata/arima_r.json: reference ARIMA fits from R's forecast package.
#
#   Rscript test/reference/arima.R > test/reference/testdata/arima_r.json
#
# Needs Debian's r-cran-forecast (made with R 4.2.2 and forecast 8.20 as Debian bookworm ships
# them) and r-cran-jsonlite. CI does not run R; the output is committed.
suppressPackageStartupMessages({library(forecast); library(jsonlite)})

datasets <- list(
  AirPassengersLog = log(AirPassengers), USAccDeaths = USAccDeaths, UKgasLog = log(UKgas),
  nottem = nottem, co2 = window(co2, start = 1990), WWWusage = WWWusage, austres = austres,
  Nile = Nile, LakeHuron = LakeHuron, lh = lh, lynxLog = log(lynx), ldeaths = ldeaths,
  uspop = uspop, BJsales = BJsales, JohnsonJohnsonLog = log(JohnsonJohnson),
  sunspotYear = sunspot.year, mdeaths = mdeaths, fdeaths = fdeaths, discoveries = discoveries,
  treering = window(treering, start = 1500)
)

# Fixed orders: data, c(p,d,q), c(P,D,Q), constant.
fixed <- list(
  list("AirPassengersLog", c(0,1,1), c(0,1,1), FALSE), list("AirPassengersLog", c(2,1,0), c(1,1,0), FALSE),
  list("USAccDeaths", c(0,1,1), c(0,1,1), FALSE), list("USAccDeaths", c(1,0,1), c(0,1,1), TRUE),
  list("UKgasLog", c(0,1,1), c(0,1,1), FALSE), list("nottem", c(1,0,0), c(2,1,0), TRUE),
  list("nottem", c(2,0,0), c(1,0,1), TRUE), list("co2", c(1,1,1), c(0,1,1), FALSE),
  list("WWWusage", c(3,1,0), c(0,0,0), FALSE), list("WWWusage", c(1,1,1), c(0,0,0), FALSE),
  list("austres", c(1,1,0), c(0,0,0), TRUE), list("austres", c(0,2,2), c(0,0,0), FALSE),
  list("Nile", c(1,1,1), c(0,0,0), FALSE), list("Nile", c(0,0,0), c(0,0,0), TRUE),
  list("LakeHuron", c(2,0,0), c(0,0,0), TRUE), list("LakeHuron", c(1,0,1), c(0,0,0), TRUE),
  list("lh", c(3,0,0), c(0,0,0), TRUE), list("lh", c(1,0,1), c(0,0,0), TRUE),
  list("lynxLog", c(2,0,0), c(0,0,0), TRUE), list("ldeaths", c(1,0,1), c(1,1,0), FALSE)
)

fitjson <- function(nm, fit, call, auto, elapsed) {
  x <- datasets[[nm]]
  m <- frequency(x)
  h <- max(10, 2 * m)
  fc <- forecast(fit, h = h, level = c(80, 95))
  a <- fit$arma # p, q, P, Q, m, d, D
  cf <- fit$coef
  get <- function(prefix, k) if (k == 0) numeric(0) else unname(cf[paste0(prefix, seq_len(k))])
  cst <- if ("intercept" %in% names(cf)) cf[["intercept"]] else if ("drift" %in% names(cf)) cf[["drift"]] else NULL
  list(data = nm, call = call, auto = auto,
       order = c(a[1], a[6], a[2]), seasonal = c(a[3], a[7], a[4]), constant = !is.null(cst),
       ar = get("ar", a[1]), ma = get("ma", a[2]), sar = get("sar", a[3]), sma = get("sma", a[4]),
       const = if (is.null(cst)) 0 else cst,
       loglik = fit$loglik, aicc = fit$aicc, sigma2 = fit$sigma2,
       # sigma2 without the d + mD residuals of R's diffuse start (see arima_test.go).
       sigma2core = if (a[6] + a[7] == 0) fit$sigma2 else
         sum(residuals(fit)[-seq_len(a[6] + a[5] * a[7])]^2) / (fit$nobs - length(fit$coef[fit$mask])),
       mean = as.numeric(fc$mean), lo80 = as.numeric(fc$lower[, 1]), hi80 = as.numeric(fc$upper[, 1]),
       lo95 = as.numeric(fc$lower[, 2]), hi95 = as.numeric(fc$upper[, 2]),
       seconds = unname(elapsed))
}

out <- list(
  source = sprintf("%s, forecast %s (Debian r-cran-forecast)", R.version.string, packageVersion("forecast")),
  series = lapply(datasets, function(x) list(m = frequency(x), y = as.numeric(x))),
  fits = list())
for (f in fixed) {
  nm <- f[[1]]
  call <- sprintf("Arima(%s, order = c(%s), seasonal = c(%s), %s = %s)", nm,
                  paste(f[[2]], collapse = ","), paste(f[[3]], collapse = ","),
                  if (sum(f[[2]][2], f[[3]][2]) == 0) "include.mean" else "include.drift", f[[4]])
  t <- system.time(fit <- if (f[[2]][2] + f[[3]][2] == 0)
    Arima(datasets[[nm]], order = f[[2]], seasonal = f[[3]], include.mean = f[[4]], method = "ML") else
    Arima(datasets[[nm]], order = f[[2]], seasonal = f[[3]], include.drift = f[[4]], method = "ML"))["elapsed"]
  out$fits[[length(out$fits) + 1]] <- fitjson(nm, fit, call, FALSE, t)
}
for (nm in names(datasets)) {
  t <- system.time(fit <- auto.arima(datasets[[nm]]))["elapsed"]
  out$fits[[length(out$fits) + 1]] <- fitjson(nm, fit, sprintf("auto.arima(%s)", nm), TRUE, t)
}
cat(toJSON(out, digits = I(15), auto_unbox = TRUE, pretty = FALSE), "\n")
