# Extracts the monthly seasonal series of the forecast-interval coverage check
# (tests/detectors/forecast_coverage_test.cc) from R's own data sets.
#
#   Rscript tests/reference/extract_seasonal_coverage.R OUT.csv
#
# writes OUT.csv in the Readings format of DESIGN.md (header `time,series,value`,
# RFC 3339 UTC times, '\n' line ends): one reading per month at the first of the
# month, 00:00:00Z. Source (Debian bookworm): r-base-core 4.2.2, package
# `datasets`; each object's help page names its publication:
#   co2             Mauna Loa CO2, ppm, 1959-1997 (Keeling & Whorf, Scripps)
#   nottem          air temperature at Nottingham Castle, deg F, 1920-1939
#                   (Anderson 1976, "Time Series Analysis and Forecasting")
#   UKDriverDeaths  car drivers killed or seriously injured in Great Britain,
#                   1969-1984 (Harvey & Durbin 1986, JRSS A 149:187-227)
#   USAccDeaths     accidental deaths in the USA, 1973-1978 (Brockwell & Davis 1991)
#   ldeaths         deaths from lung diseases in the UK, 1974-1979 (Diggle 1990)
#   AirPassengers   airline passengers, thousands, 1949-1960, natural log
#                   (Box & Jenkins 1976, series G)
# The stopifnot() checks pin the facts quoted here, so a changed object fails loudly.

args <- commandArgs(trailingOnly = TRUE)
if (length(args) != 1) stop("usage: Rscript extract_seasonal_coverage.R OUT.csv")

rows <- character(0)
add <- function(name, x, digits) {
  stopifnot(frequency(x) == 12, !anyNA(x))
  start_year <- start(x)[1]
  start_month <- start(x)[2]
  k <- seq_along(x) - 1 + (start_month - 1)
  time <- sprintf("%04d-%02d-01T00:00:00Z", start_year + k %/% 12, 1 + k %% 12)
  rows <<- c(rows, paste(time, name, formatC(as.numeric(x), format = "f", digits = digits),
                         sep = ","))
}

stopifnot(length(datasets::co2) == 468, all(start(datasets::co2) == c(1959, 1)))
add("co2/mauna-loa/ppm", datasets::co2, 2)
stopifnot(length(datasets::nottem) == 240, all(start(datasets::nottem) == c(1920, 1)))
add("nottem/nottingham/temp_f", datasets::nottem, 1)
stopifnot(length(datasets::UKDriverDeaths) == 192)
add("ukdriverdeaths/gb/count", datasets::UKDriverDeaths, 0)
stopifnot(length(datasets::USAccDeaths) == 72)
add("usaccdeaths/us/count", datasets::USAccDeaths, 0)
stopifnot(length(datasets::ldeaths) == 72)
add("ldeaths/uk/count", datasets::ldeaths, 0)
stopifnot(length(datasets::AirPassengers) == 144, sum(datasets::AirPassengers) == 40363)
add("airpassengers/world/log", log(datasets::AirPassengers), 6)

con <- file(args[[1]], open = "wb")  # "wb": '\n' line ends
writeLines(c("time,series,value", rows), con, sep = "\n")
close(con)
