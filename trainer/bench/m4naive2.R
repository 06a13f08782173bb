# The M4 organisers' Naive2 benchmark (their benchmark code's SeasonalityTest and the f3
# forecast of their Benchmarks function, recalled from memory), used by the bench's --reference-r
# (rScript in rref.go, method naive2) and by testdata/naive2_owa.R. x is a ts whose frequency is
# the season length p: seasonal when n >= 3p and |r_p| passes the 90% test on R's acf with its
# default lag.max; then naive() on x / decompose(x, "multiplicative")$seasonal, times the last
# p seasonal indices.
seasonality_test <- function(x, p) {
  if (length(x) < 3 * p) return(FALSE)
  r <- acf(x, plot = FALSE)$acf[-1, 1, 1]
  clim <- 1.645 / sqrt(length(x)) * sqrt(cumsum(c(1, 2 * r^2)))
  s <- abs(r[p]) > clim[p]
  if (is.na(s)) FALSE else s
}
naive2 <- function(x, h) {
  p <- frequency(x)
  if (p > 1 && seasonality_test(x, p)) {
    si <- decompose(x, type = "multiplicative")$seasonal
    out <- head(rep(si[(length(si) - p + 1):length(si)], h), h)
    return(naive(x / si, h = h)$mean * out)
  }
  naive(x, h = h)$mean
}
