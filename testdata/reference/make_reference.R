# make_reference.R -- writes the reference (golden) files in testdata/reference/
# against which the Go tests check aftercast's per-lead accuracy metrics.
#
# Run from the repository root:
#   Rscript testdata/reference/make_reference.R
#
# Needs R and the CRAN package "forecast" (Debian: apt-get install -y r-cran-forecast).
# Deterministic, no network, no random numbers. Uses only datasets that ship with R
# (package "datasets") or with the "forecast" package.
#
# For every case it writes
#   <case>.csv          series,origin_time,target_time,forecast,actual (one row per origin x lead)
#   <case>_history.csv  series,time,value: the training actuals up to and including the first origin
#   <case>.golden.json  the per-lead and overall metrics in the shape of `aftercast evaluate --format json`
# and finally cases.json, the manifest of all cases.
#
# Where the numbers come from:
#   ME, RMSE, MAE, MAPE, MASE  forecast::accuracy()  (see ref_metrics() for how it is called)
#   sMAPE, WAPE                plain R arithmetic in this script (accuracy() has no such measures
#                              in our definition)
#   n, mape_excluded, smape_excluded   counts in this script
# Every accuracy() value is also recomputed by hand from the metric definitions and the script
# stops if the two disagree by more than 1e-12 relative.

suppressPackageStartupMessages(library(forecast))

outdir <- file.path("testdata", "reference")
if (!dir.exists(outdir)) stop("run from the repository root: ", outdir, " not found")

r_version <- R.version.string
fc_version <- as.character(packageVersion("forecast"))
reference_text <- sprintf("forecast::accuracy() from forecast %s on %s; sMAPE and WAPE by plain R arithmetic",
                          fc_version, r_version)

# ---------------------------------------------------------------- formatting helpers

# 17 significant digits: enough for any double to round-trip exactly, so Go parses the very
# doubles R used.
num17 <- function(x) sprintf("%.17g", x)
json_num <- function(x) if (is.null(x) || is.na(x) || !is.finite(x)) "null" else num17(x)
json_str <- function(s) {
  s <- gsub("\\", "\\\\", s, fixed = TRUE)
  s <- gsub("\"", "\\\"", s, fixed = TRUE)
  paste0("\"", s, "\"")
}

# RFC 3339 UTC timestamps built with integer arithmetic (no floating time()).
# Calendar-month grid: observation i (1-based) of a series starting at year y0, month mo0
# (1..12), every `months` months, is the first of its month at 00:00:00Z.
month_times <- function(y0, mo0, months, n) {
  k <- (mo0 - 1) + (seq_len(n) - 1) * months
  sprintf("%04d-%02d-01T00:00:00Z", y0 + k %/% 12, k %% 12 + 1)
}
# Fixed grid: anchor + (i-1) * step_seconds, in UTC.
fixed_times <- function(anchor, step_seconds, n) {
  t0 <- as.POSIXct(anchor, tz = "UTC", format = "%Y-%m-%dT%H:%M:%SZ")
  format(t0 + (seq_len(n) - 1) * step_seconds, "%Y-%m-%dT%H:%M:%SZ", tz = "UTC")
}

# ---------------------------------------------------------------- metrics

close_enough <- function(a, b, what) {
  if (is.na(a) && is.na(b)) return(invisible(TRUE))
  ok <- is.finite(a) && is.finite(b) && abs(a - b) <= 1e-12 * max(abs(a), abs(b))
  if (!ok) stop(sprintf("%s: accuracy() gives %.17g but the definition gives %.17g", what, a, b))
  invisible(TRUE)
}

# The MASE scale of our method computed by hand: mean over t of |y_t - y_{t-m}| on the training
# actuals (m = 1 when the series has no season); NA when there is no such difference.
hand_scale <- function(train, m) {
  if (length(train) <= m) return(NA_real_)
  mean(abs(train[(m + 1):length(train)] - train[1:(length(train) - m)]))
}

# Metrics of one group of pairs (actuals y, forecasts f) with the training actuals `train` and
# season m. Returns a named list; NA stands for undefined (written as JSON null).
ref_metrics <- function(y, f, train, m, label) {
  n <- length(y)
  e <- y - f

  # --- ME, RMSE, MAE, MASE from forecast::accuracy().
  # accuracy() takes the MASE scale from the training data of its forecast object
  # (getResponse(object), i.e. object$x) and differences it according to d and D:
  # D = 1 takes seasonal differences at lag frequency(object$x), d = 1 first differences.
  # Our scale is mean |y_t - y_{t-m}| over the actuals up to and including the FIRST origin of
  # the case, so we hand accuracy() a forecast object whose $x is exactly that training series,
  # as a ts of frequency m, and whose $mean is this group's forecasts, and pass d and D
  # explicitly: d = 0, D = 1 when m > 1 (lag-m differences); d = 1, D = 0 when m = 1.
  # `test = seq_len(n)` makes accuracy() report the test-set row only (the object has no fitted
  # values). A plain numeric f with accuracy(f, x) would give no MASE at all.
  obj <- structure(list(mean = f, x = ts(train, frequency = m)), class = "forecast")
  d <- if (m > 1) 0 else 1
  D <- if (m > 1) 1 else 0
  acc <- accuracy(obj, y, test = seq_len(n), d = d, D = D)
  me <- unname(acc[1, "ME"])
  rmse <- unname(acc[1, "RMSE"])
  mae <- unname(acc[1, "MAE"])
  s <- hand_scale(train, m)
  mase <- if (is.finite(s) && s > 0) unname(acc[1, "MASE"]) else NA_real_

  # --- MAPE from forecast::accuracy() on the pairs with a non-zero actual only.
  # accuracy() divides by the actual and so gives Inf (or drops 0/0 as NaN) when an actual is
  # zero; our MAPE leaves those pairs out and counts them in mape_excluded. So the reference
  # MAPE is accuracy() called on the subset of pairs with y != 0 (for a case without zero
  # actuals the subset is all pairs); NA (null) when no pair remains.
  nz <- y != 0
  mape_excluded <- sum(!nz)
  mape <- if (any(nz)) unname(accuracy(f[nz], y[nz])[1, "MAPE"]) else NA_real_

  # --- sMAPE and WAPE: plain R arithmetic (not from accuracy()).
  den <- abs(y) + abs(f)
  ok <- den > 0
  smape_excluded <- sum(!ok)
  smape <- if (any(ok)) 100 * mean(2 * abs(e[ok]) / den[ok]) else NA_real_
  sy <- sum(abs(y))
  wape <- if (sy > 0) 100 * sum(abs(e)) / sy else NA_real_

  # --- Cross-check every accuracy() value against the definitions.
  close_enough(me, mean(e), paste(label, "ME"))
  close_enough(mae, mean(abs(e)), paste(label, "MAE"))
  close_enough(rmse, sqrt(mean(e^2)), paste(label, "RMSE"))
  close_enough(mape, if (any(nz)) 100 * mean(abs(e[nz]) / abs(y[nz])) else NA_real_, paste(label, "MAPE"))
  close_enough(mase, if (is.finite(s) && s > 0) mean(abs(e)) / s else NA_real_, paste(label, "MASE"))
  if (is.finite(s) && s > 0) {
    # The scale accuracy() used, recovered from its own output, equals the hand-computed scale.
    close_enough(unname(acc[1, "MAE"] / acc[1, "MASE"]), s, paste(label, "MASE scale"))
  }
  if (mape_excluded == 0) {
    close_enough(mape, unname(acc[1, "MAPE"]), paste(label, "MAPE (all pairs)"))
  }

  list(n = n, me = me, mae = mae, rmse = rmse, mape = mape, mape_excluded = mape_excluded,
       smape = smape, smape_excluded = smape_excluded, wape = wape, mase = mase)
}

metrics_json <- function(x, lead = NULL, indent) {
  fields <- c(
    if (!is.null(lead)) sprintf("\"lead\": %d", lead),
    sprintf("\"n\": %d", as.integer(x$n)),
    sprintf("\"me\": %s", json_num(x$me)),
    sprintf("\"mae\": %s", json_num(x$mae)),
    sprintf("\"rmse\": %s", json_num(x$rmse)),
    sprintf("\"mape\": %s", json_num(x$mape)),
    sprintf("\"mape_excluded\": %d", as.integer(x$mape_excluded)),
    sprintf("\"smape\": %s", json_num(x$smape)),
    sprintf("\"smape_excluded\": %d", as.integer(x$smape_excluded)),
    sprintf("\"wape\": %s", json_num(x$wape)),
    sprintf("\"mase\": %s", json_num(x$mase)))
  pad <- strrep(" ", indent)
  paste0("{\n", paste0(pad, "  ", fields, collapse = ",\n"), "\n", pad, "}")
}

# ---------------------------------------------------------------- one case

run_case <- function(cs) {
  y <- as.numeric(cs$y)
  n <- length(y)
  stopifnot(length(cs$times) == n, !anyNA(y))
  freq <- frequency(cs$y)
  start_tsp <- tsp(cs$y)[1]

  rows <- list()
  for (o in cs$origins) {
    x <- ts(y[1:o], start = start_tsp, frequency = freq)  # data up to and including the origin
    fc <- as.numeric(cs$forecaster(x, cs$H))
    stopifnot(length(fc) == cs$H, all(is.finite(fc)))
    h <- seq_len(cs$H)
    keep <- o + h <= n  # only targets that exist in the data
    h <- h[keep]
    rows[[length(rows) + 1]] <- data.frame(origin = o, lead = h, target = o + h,
                                           forecast = fc[keep], actual = y[o + h])
  }
  pairs <- do.call(rbind, rows)

  # Every number written must read back as the very same double.
  for (v in list(pairs$forecast, pairs$actual, y)) {
    stopifnot(all(as.numeric(num17(v)) == v))
  }

  key <- cs$series
  csv <- data.frame(series = key, origin_time = cs$times[pairs$origin], target_time = cs$times[pairs$target],
                    forecast = num17(pairs$forecast), actual = num17(pairs$actual))
  write.csv(csv, file.path(outdir, paste0(cs$name, ".csv")), row.names = FALSE, quote = FALSE)

  first <- min(cs$origins)
  train <- y[1:first]
  hist <- data.frame(series = key, time = cs$times[1:first], value = num17(train))
  write.csv(hist, file.path(outdir, paste0(cs$name, "_history.csv")), row.names = FALSE, quote = FALSE)

  leads <- sort(unique(pairs$lead))
  lead_json <- character(0)
  for (l in leads) {
    p <- pairs[pairs$lead == l, ]
    mt <- ref_metrics(p$actual, p$forecast, train, cs$season, sprintf("%s lead %d", cs$name, l))
    lead_json <- c(lead_json, metrics_json(mt, lead = l, indent = 8))
  }
  overall <- ref_metrics(pairs$actual, pairs$forecast, train, cs$season, sprintf("%s overall", cs$name))

  golden <- paste0(
    "{\n  \"results\": [\n    {\n",
    "      \"series\": ", json_str(key), ",\n",
    "      \"model\": \"\",\n",
    "      \"step\": ", json_str(cs$step), ",\n",
    "      \"leads\": [\n        ", paste(lead_json, collapse = ",\n        "), "\n      ],\n",
    "      \"overall\": ", metrics_json(overall, indent = 6), "\n",
    "    }\n  ]\n}\n")
  writeLines(golden, file.path(outdir, paste0(cs$name, ".golden.json")), sep = "")

  cat(sprintf("%-14s rows %4d  origins %3d  leads %d..%d  history %4d  scale %.17g\n",
              cs$name, nrow(pairs), length(cs$origins), min(leads), max(leads), first,
              hand_scale(train, cs$season)))

  manifest <- c(
    sprintf("\"name\": %s", json_str(cs$name)),
    sprintf("\"input\": %s", json_str(paste0(cs$name, ".csv"))),
    sprintf("\"history\": %s", json_str(paste0(cs$name, "_history.csv"))),
    sprintf("\"golden\": %s", json_str(paste0(cs$name, ".golden.json"))),
    sprintf("\"step\": %s", json_str(cs$step)),
    sprintf("\"season\": %d", as.integer(cs$season)),
    sprintf("\"source\": %s", json_str(cs$source)),
    sprintf("\"forecaster\": %s", json_str(cs$forecaster_text)),
    sprintf("\"reference\": %s", json_str(reference_text)),
    sprintf("\"notes\": %s", json_str(cs$notes)))
  paste0("  {\n", paste0("    ", manifest, collapse = ",\n"), "\n  }")
}

# ---------------------------------------------------------------- the cases

common_notes <- paste(
  "MASE: accuracy() is given a forecast object whose training series ($x) is the actuals up to and",
  "including the first origin (the _history.csv file), as a ts of frequency = season, with d and D",
  "set explicitly (d=0, D=1 for a season > 1: lag-season differences; d=1, D=0 for season 1), so its",
  "scale is the same single scale for every lead and for overall; the script asserts that this scale",
  "equals mean|y_t - y_{t-m}| computed by hand.")

cases <- list(
  list(
    name = "airpassengers", series = "airpassengers",
    y = AirPassengers, times = month_times(1949, 1, 1, length(AirPassengers)),
    step = "1mo", season = 12, H = 12,
    # origins: Dec 1954 (obs 72) to Dec 1958 (obs 120), monthly: 49 origins
    origins = 72:120,
    forecaster = function(x, h) forecast(Arima(x, order = c(0, 1, 1), seasonal = c(0, 1, 1)), h = h)$mean,
    forecaster_text = paste("forecast::Arima(y, order=c(0,1,1), seasonal=c(0,1,1)) (airline model, raw scale,",
                            "default CSS-ML fit) refitted at each origin; forecast(fit, h=12)$mean;",
                            "origins 1954-12 to 1958-12 monthly, leads 1..12"),
    source = "AirPassengers, R datasets package (Box, Jenkins & Reinsel, Time Series Analysis, series G)",
    notes = paste("No zero actuals: MAPE is accuracy()'s MAPE over all pairs (the script also asserts it",
                  "equals accuracy() on the y != 0 subset).", common_notes)),
  list(
    name = "discoveries", series = "discoveries",
    y = discoveries, times = month_times(1860, 1, 12, length(discoveries)),
    step = "1y", season = 1, H = 5,
    # origins: 1910 (obs 51) to 1958 (obs 99), yearly: 49 origins; targets after 1959 dropped
    origins = 51:99,
    forecaster = function(x, h) naive(x, h = h)$mean,
    forecaster_text = paste("forecast::naive(y, h=5)$mean (last value carried forward) at each origin;",
                            "origins 1910 to 1958 yearly, leads 1..5, targets beyond 1959 dropped",
                            "(so later leads have fewer pairs)"),
    source = "discoveries, R datasets package (yearly numbers of great inventions and scientific discoveries 1860-1959; The World Almanac and Book of Facts 1975)",
    notes = paste("The series has zero actuals (1917, 1933, 1956, 1957, 1959 among the targets).",
                  "accuracy() divides by the actual and gives Inf for MAPE when an actual is zero, so",
                  "the reference MAPE is accuracy() called on the subset of pairs with actual != 0, and",
                  "mape_excluded counts the pairs with actual == 0. Pairs whose actual and forecast are",
                  "both 0 are left out of sMAPE and counted in smape_excluded.", common_notes)),
  list(
    name = "taylor", series = "taylor",
    y = taylor, times = fixed_times("2000-06-05T00:00:00Z", 1800, length(taylor)),
    step = "30m", season = 336, H = 48,
    # origins: every 48 half-hours (daily, at the last half-hour of a day) from obs 672
    # (end of day 14, 2000-06-18T23:30:00Z) to obs 1296 (end of day 27): 14 origins
    origins = seq(672, 1296, by = 48),
    forecaster = function(x, h) snaive(x, h = h)$mean,
    forecaster_text = paste("forecast::snaive(y, h=48)$mean with the series' frequency 336 (same half-hour",
                            "one week earlier) at each origin; origins every 48 half-hours from",
                            "2000-06-18T23:30:00Z to 2000-07-01T23:30:00Z, leads 1..48"),
    source = "taylor, forecast package (half-hourly electricity demand in England and Wales, Monday 5 June 2000 to Sunday 27 August 2000, MW; Taylor 2003, J. Oper. Res. Soc. 54, 799-805)",
    notes = paste("Timestamps: the package gives the period but no clock times; our chosen calendar",
                  "anchor is observation 1 = 2000-06-05T00:00:00Z (a Monday), observation k =",
                  "anchor + (k-1)*30 minutes, in UTC (no daylight-saving shift). Season 336 (one week)",
                  "is the series' own frequency. No zero actuals: MAPE is accuracy()'s MAPE over all",
                  "pairs.", common_notes)),
  list(
    name = "ukgas", series = "ukgas",
    y = UKgas, times = month_times(1960, 1, 3, length(UKgas)),
    step = "3mo", season = 4, H = 8,
    # origins: 1975Q4 (obs 64) to 1985Q4 (obs 104), quarterly: 41 origins; targets after 1986Q4 dropped
    origins = 64:104,
    forecaster = function(x, h) forecast(ets(x, model = "MAM", damped = FALSE), h = h)$mean,
    forecaster_text = paste("forecast::ets(y, model=\"MAM\", damped=FALSE) refitted at each origin;",
                            "forecast(fit, h=8)$mean; origins 1975Q4 to 1985Q4 quarterly, leads 1..8,",
                            "targets beyond 1986Q4 dropped (so leads 5..8 have fewer pairs)"),
    source = "UKgas, R datasets package (quarterly UK gas consumption 1960Q1-1986Q4, millions of therms; Durbin & Koopman 2001)",
    notes = paste("Quarters are written as the first day of their first month (1960-01-01, 1960-04-01, ...).",
                  "No zero actuals: MAPE is accuracy()'s MAPE over all pairs.", common_notes))
)

entries <- vapply(cases, run_case, character(1))
writeLines(paste0("[\n", paste(entries, collapse = ",\n"), "\n]\n"), file.path(outdir, "cases.json"), sep = "")
cat(sprintf("%s; forecast %s\n", r_version, fc_version))
