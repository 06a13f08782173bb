# Sourced by weekly.R and seasonstrength.R (run from the repository root): generators of the
# invented Fenwick Lane weekly series (case counts with a trend, a yearly cycle of 52.18 weeks
# and noise; or a four-week peak before the year end). They draw from R's generator, so the
# caller sets the seed.
weekly <- function(n, level, slope, amp, sd) {
  t <- 0:(n - 1)
  round((level + slope * t) * (1 + amp * sin(2 * pi * t / 52.18) + 0.4 * amp * cos(4 * pi * t / 52.18)) +
    rnorm(n, sd = sd), 2)
}
peaked <- function(n, level, slope, peak, sd) {
  t <- 0:(n - 1)
  round(level + slope * t + peak * ((t %% 52) %in% 47:50) + rnorm(n, sd = sd), 2)
}
