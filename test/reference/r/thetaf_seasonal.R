# Sourced by simple.R and weekly.R (run from the repository root).
suppressPackageStartupMessages(library(forecast))

# thetaf's own seasonality decision (forecast 8.20: n > 2m, qnorm(0.95), acf of the data).
thetaf_seasonal <- function(x) {
  m <- frequency(x)
  n <- length(x)
  if (m > 1 && !is.constant(x) && n > 2 * m) {
    r <- as.numeric(acf(x, lag.max = m, plot = FALSE)$acf)[-1]
    stat <- sqrt((1 + 2 * sum(r[-m]^2)) / n)
    return(abs(r[m]) / stat > qnorm(0.95))
  }
  FALSE
}
