# Worked example behind TestNaive2AndOWAWorkedExample (trainer/bench/owa_test.go):
# cd trainer/bench/testdata && Rscript --vanilla naive2_owa.R (R 4.2.2, forecast 8.20). Naive2 is
# the M4 organisers' definition written out in ../m4naive2.R;
# sMAPE and MASE are the M4 formulas, OWA = (sMAPE/sMAPE_Naive2 + MASE/MASE_Naive2) / 2 of the means.
suppressPackageStartupMessages(library(forecast))
source("../m4naive2.R") # seasonality_test, naive2
smape <- function(y, f) mean(200 * abs(y - f) / (abs(y) + abs(f)))
mase <- function(ins, y, f, m) { n <- length(ins); mean(abs(y - f)) / mean(abs(ins[(m+1):n] - ins[1:(n-m)])) }
# Fenwick Lane Provisions depot A: quarterly crates, seasonal
a <- ts(c(120, 180, 150, 90, 130, 195, 160, 95, 140, 205, 172, 101, 150, 222, 181, 108), frequency = 4)
ya <- c(158, 236, 190, 112)
fa <- c(155, 230, 195, 110)   # another method's forecast
# Fenwick Lane Provisions depot B: quarterly, no seasonality
b <- ts(c(50, 52, 49, 53, 51, 50, 54, 52, 51, 53, 50, 52), frequency = 4)
yb <- c(53, 51, 52, 54)
fb <- c(52, 52, 52, 52)
print(seasonality_test(a, 4)); print(seasonality_test(b, 4))
na <- naive2(a, 4); nb <- naive2(b, 4)
cat(format(as.numeric(na), digits = 17), "\n")
cat(format(as.numeric(nb), digits = 17), "\n")
s2 <- c(smape(ya, na), smape(yb, nb)); m2 <- c(mase(a, ya, na, 4), mase(b, yb, nb, 4))
s1 <- c(smape(ya, fa), smape(yb, fb)); m1 <- c(mase(a, ya, fa, 4), mase(b, yb, fb, 4))
cat("naive2 smape", format(s2, digits=17), "mase", format(m2, digits=17), "\n")
cat("method smape", format(s1, digits=17), "mase", format(m1, digits=17), "\n")
owa <- (mean(s1)/mean(s2) + mean(m1)/mean(m2)) / 2
cat("owa", format(owa, digits = 17), "\n")
# the acf lag.max detail: hourly, strongly seasonal, n = 240 (lag.max 23) and n = 264 (lag.max 24)
h <- function(n) ts(100 + 30 * sin(2 * pi * (0:(n-1)) / 24) + (0:(n-1)) %% 5, frequency = 24)
cat("n240", format(as.numeric(naive2(h(240), 3)), digits = 17), "\n")
cat("n264", format(as.numeric(naive2(h(264), 3)), digits = 17), "\n")
print(seasonality_test(h(240), 24)); print(seasonality_test(h(264), 24))
