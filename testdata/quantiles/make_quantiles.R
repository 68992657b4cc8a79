# make_quantiles.R -- writes testdata/quantiles/quantiles.csv, reference values of
# the Student t, Gamma and standard normal quantile functions against which the
# Go tests (scoring/quantile_test.go) check the band construction's quantiles.
#
# Run from the repository root:
#   Rscript testdata/quantiles/make_quantiles.R
#
# Needs base R only (Debian: apt-get install -y r-base-core). Deterministic, no
# network, no random numbers. Columns:
#   fn     qt (Student t, a = df), qgamma (a = shape, b = rate) or qnorm
#   p      the probability level
#   a, b   the parameters (b is NA for qt and qnorm, a is NA for qnorm)
#   value  the quantile from R's qt/qgamma/qnorm
# Every number is printed with 17 significant digits so that Go parses the
# exact doubles R used.

outdir <- file.path("testdata", "quantiles")
if (!dir.exists(outdir)) stop("run from the repository root: ", outdir, " not found")

num17 <- function(x) ifelse(is.na(x), "NA", sprintf("%.17g", x))

cases <- rbind(
  # Student t: whole and fractional df, as the band uses (nu = K/f_K - 1 >= 2)
  data.frame(fn = "qt", p = 0.975, a = 10,     b = NA),
  data.frame(fn = "qt", p = 0.995, a = 5,      b = NA),
  data.frame(fn = "qt", p = 0.975, a = 30,     b = NA),
  data.frame(fn = "qt", p = 0.975, a = 2,      b = NA),
  data.frame(fn = "qt", p = 0.99,  a = 2.5,    b = NA),
  data.frame(fn = "qt", p = 0.975, a = 41.75,  b = NA),
  data.frame(fn = "qt", p = 0.99,  a = 178.25, b = NA),
  data.frame(fn = "qt", p = 0.995, a = 363.5,  b = NA),
  data.frame(fn = "qt", p = 0.025, a = 17.3,   b = NA),
  data.frame(fn = "qt", p = 0.005, a = 1000,   b = NA),
  # near the median, where 1 - nu/(nu + t^2) cancels
  data.frame(fn = "qt", p = 0.5 + 1e-9, a = 300, b = NA),
  data.frame(fn = "qt", p = 0.5 - 1e-5, a = 3.5, b = NA),
  data.frame(fn = "qt", p = 0.6,   a = 12,     b = NA),
  data.frame(fn = "qt", p = 0.74,  a = 2,      b = NA),
  # Gamma with shape and rate: the MAE/MSE band is Gamma(c^2/V, c/V)
  data.frame(fn = "qgamma", p = 0.025, a = 2.5,   b = 3.1),
  data.frame(fn = "qgamma", p = 0.975, a = 48.3,  b = 60.5),
  data.frame(fn = "qgamma", p = 0.99,  a = 48.3,  b = 60.5),
  data.frame(fn = "qgamma", p = 0.025, a = 300,   b = 150),
  data.frame(fn = "qgamma", p = 0.995, a = 1e4,   b = 1e4),
  data.frame(fn = "qgamma", p = 0.99,  a = 1e6,   b = 1e3),
  data.frame(fn = "qgamma", p = 0.5,   a = 0.7,   b = 1),
  data.frame(fn = "qgamma", p = 0.01,  a = 5,     b = 0.5),
  data.frame(fn = "qgamma", p = 0.975, a = 12.25, b = 0.004),
  data.frame(fn = "qgamma", p = 0.005, a = 150,   b = 2e3),
  # standard normal
  data.frame(fn = "qnorm", p = 0.975, a = NA, b = NA),
  data.frame(fn = "qnorm", p = 0.995, a = NA, b = NA),
  data.frame(fn = "qnorm", p = 0.99,  a = NA, b = NA)
)

value <- mapply(function(fn, p, a, b) {
  switch(fn,
         qt = qt(p, df = a),
         qgamma = qgamma(p, shape = a, rate = b),
         qnorm = qnorm(p))
}, cases$fn, cases$p, cases$a, cases$b)

out <- file.path(outdir, "quantiles.csv")
lines <- c(sprintf("# %s; made by testdata/quantiles/make_quantiles.R", R.version.string),
           "fn,p,a,b,value",
           sprintf("%s,%s,%s,%s,%s", cases$fn, num17(cases$p), num17(cases$a), num17(cases$b), num17(value)))
writeLines(lines, out)
cat("wrote", out, "(", nrow(cases), "cases )\n")

# ---------------------------------------------------------------- band construction
# An independent implementation, in R, of method.md §4 steps 1-5, run on a few
# deterministic error series. scoring/band_test.go reads
#   band_series.csv     case,lead,t,e          the error series e_t in origin order
#   band_reference.csv  case,metric,n,field,value
# and checks its Summarize/Bound against them (1e-9 relative). Fields: K, c, s2,
# mhat, M, fK, nu, Keff, fn (f_n), V, and bound@p for the levels p of the band.
# Reading of step 2 shared with the Go code (see Summarize): rho_k for
# k = 1..min(mmax+4, K-1); mhat = first j in 1..mmax with |rho_j..rho_{j+4}| < crit
# (the run must lie within the computed lags), else the largest k <= mmax with
# |rho_k| > crit, else 1. R's acf() uses the divisor K the method asks for.

band_summary <- function(q, h) {
  K <- length(q)
  mmax <- max(ceiling(sqrt(K)) + 5, min(2 * h, floor(K / 3)))
  crit <- 1.96 * sqrt(log10(K) / K)
  L <- min(mmax + 4, K - 1)
  rho <- acf(q, lag.max = L, plot = FALSE, demean = TRUE)$acf[-1]
  mhat <- NA
  for (j in seq_len(mmax)) {
    if (j + 4 > L) break
    if (all(abs(rho[j:(j + 4)]) < crit)) { mhat <- j; break }
  }
  if (is.na(mhat)) {
    sig <- which(abs(rho[seq_len(min(mmax, L))]) > crit)
    mhat <- if (length(sig) > 0) max(sig) else 1
  }
  M <- min(2 * mhat, mmax)
  lam <- function(x) ifelse(abs(x) < 0.5, 1, ifelse(abs(x) <= 1, 2 * (1 - abs(x)), 0))
  k <- seq_len(min(M, L))
  fK <- min(max(1 + 2 * sum(lam(k / M) * rho[k]), 0.2), K)
  list(K = K, c = mean(q), s2 = var(q), rho = rho, mhat = mhat, M = M, L = L, fK = fK,
       nu = max(K / fK - 1, 2), Keff = K / fK, lam = lam)
}

band_fn <- function(s, n) {
  k <- seq_len(min(n - 1, s$M, s$L))
  min(max(1 + 2 * sum(s$lam(k / s$M) * (1 - k / n) * s$rho[k]), 0.2), n)
}

band_V <- function(s, n) s$s2 * (band_fn(s, n) / n + s$fK / s$K) / (1 - min(s$fK / s$K, 0.5))

band_bound <- function(s, metric, n, p) {
  V <- band_V(s, n)
  pp <- max(p, 1 - p)
  tq <- qt(pp, df = s$nu)
  if (metric == "me") return(s$c + sign(p - 0.5) * tq * sqrt(V))
  Vp <- V * (tq / qnorm(pp))^2
  b <- qgamma(p, shape = s$c^2 / Vp, rate = s$c / Vp)
  if (metric == "rmse") sqrt(b) else b
}

frac <- function(x) x - floor(x)
series <- list(
  # the hand-checked example of band_test.go (q = |e| = e)
  hand = list(lead = 1, e = c(2, 4, 4, 4, 5, 5, 7, 9)),
  # smooth, weakly periodic errors
  waves = list(lead = 3, e = {t <- 1:240; sin(1.3 * t) + 0.8 * sin(0.37 * t) + 0.3 * cos(2.9 * t)}),
  # strongly autocorrelated errors: AR(1), phi = 0.85, driven by the Park-Miller
  # "minimal standard" generator (exact in double arithmetic)
  ar = list(lead = 12, e = {x <- numeric(400); p <- 0; u <- 12345
                            for (t in 1:400) { u <- (16807 * u) %% 2147483647
                                               p <- 0.85 * p + (u / 2147483647 - 0.5); x[t] <- p }
                            x}),
  # a slow swing: significant autocorrelations at every lag searched, so m-hat
  # falls back to the largest significant lag
  slow = list(lead = 2, e = {t <- 1:200; 1.5 + sin(0.05 * t) + 0.2 * sin(2.1 * t)})
)

srows <- character(0)
rrows <- character(0)
for (name in names(series)) {
  cs <- series[[name]]
  srows <- c(srows, sprintf("%s,%d,%d,%s", name, cs$lead, seq_along(cs$e), num17(cs$e)))
  for (metric in c("mae", "rmse", "me")) {
    if (name == "hand" && metric != "mae") next
    q <- switch(metric, mae = abs(cs$e), rmse = cs$e^2, me = cs$e)
    s <- band_summary(q, cs$lead)
    add <- function(n, field, v) rrows <<- c(rrows, sprintf("%s,%s,%d,%s,%s", name, metric, n, field, num17(v)))
    for (f in c("K", "c", "s2", "mhat", "M", "fK", "nu", "Keff")) add(0, f, s[[f]])
    for (n in c(4, 7, 14, 30)) {
      add(n, "fn", band_fn(s, n))
      add(n, "V", band_V(s, n))
      for (p in c(0.005, 0.025, 0.5, 0.975, 0.99, 0.995)) {
        if (p == 0.5 && metric != "me") next  # tau_p is 0/0 at p = 1/2
        add(n, sprintf("bound@%s", format(p)), band_bound(s, metric, n, p))
      }
    }
  }
}
writeLines(c(sprintf("# %s; made by testdata/quantiles/make_quantiles.R", R.version.string),
             "case,lead,t,e", srows), file.path(outdir, "band_series.csv"))
writeLines(c(sprintf("# %s; made by testdata/quantiles/make_quantiles.R", R.version.string),
             "case,metric,n,field,value", rrows), file.path(outdir, "band_reference.csv"))
cat("wrote band_series.csv and band_reference.csv\n")
