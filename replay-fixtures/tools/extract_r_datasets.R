# Extracts Plumbline replay fixtures from data sets shipped in Debian's R packages.
#
#   Rscript replay-fixtures/tools/extract_r_datasets.R OUTDIR
#
# writes OUTDIR/{nile,coal,airline,beaver2,seatbelts}/readings.csv in the
# Readings format of DESIGN.md (header `time,series,value`, RFC 3339 UTC times,
# '\n' line ends). Sources (Debian bookworm): r-base-core 4.2.2 (package
# `datasets`) and r-cran-boot 1.3-28 (package `boot`). Every conversion
# convention is documented in the fixture's SOURCE.md; the stopifnot() checks
# below pin the facts those files quote, so a changed upstream object fails loudly.

args <- commandArgs(trailingOnly = TRUE)
if (length(args) != 1) stop("usage: Rscript extract_r_datasets.R OUTDIR")
out <- args[[1]]

write_readings <- function(dir, time, series, value) {
  stopifnot(length(time) == length(value), !anyNA(time), !anyNA(value))
  dir.create(file.path(out, dir), recursive = TRUE, showWarnings = FALSE)
  lines <- c("time,series,value", paste(time, series, value, sep = ","))
  con <- file(file.path(out, dir, "readings.csv"), open = "wb")  # "wb": '\n' line ends
  writeLines(lines, con, sep = "\n")
  close(con)
}

# --- 1. Nile: datasets::Nile, annual flow at Aswan, 1871-1970, 10^8 m^3 ------
# One reading per calendar year, stamped at mid-year: YYYY-07-01T00:00:00Z.
nile <- datasets::Nile
stopifnot(isTRUE(all.equal(tsp(nile), c(1871, 1970, 1))), length(nile) == 100,
          sum(nile) == 91935, min(nile) == 456, which.min(nile) == 1913 - 1870)
nile_years <- 1871:1970
write_readings("nile", sprintf("%d-07-01T00:00:00Z", nile_years), "nile/aswan/flow",
               sprintf("%.0f", as.numeric(nile)))

# --- 2. Coal-mining disasters: boot::coal$date, 191 events -------------------
# The decimal dates are exactly 1851 + n / 365.25 for integer n, where n counts
# days from 1850-12-31 (checked below to 1e-6 days); decoding n gives the
# calendar day, which matches the help page's first (15 Mar 1851) and last
# (22 Mar 1962) dates. Each disaster is one reading of value 1 at 12:00:00Z of
# its day (time of day unknown). Two disasters share 1875-12-06: two readings
# with the same time.
coal <- boot::coal$date
stopifnot(length(coal) == 191, !is.unsorted(coal))
n_days <- (coal - 1851) * 365.25
stopifnot(max(abs(n_days - round(n_days))) < 1e-6)
coal_day <- as.Date("1850-12-31") + round(n_days)
stopifnot(format(coal_day[1]) == "1851-03-15", format(coal_day[191]) == "1962-03-22",
          all(as.integer(format(coal_day, "%Y")) == floor(coal)),
          sum(duplicated(coal_day)) == 1, format(coal_day[duplicated(coal_day)]) == "1875-12-06")
write_readings("coal", format(coal_day, "%Y-%m-%dT12:00:00Z"), "coal/uk/disasters",
               rep("1", length(coal)))

# --- 3. Airline passengers: log(datasets::AirPassengers), monthly 1949-1960 ---
# One reading per month at the first of the month, 00:00:00Z; value = natural
# log of the monthly total (thousands of passengers), 6 decimals.
ap <- datasets::AirPassengers
stopifnot(isTRUE(all.equal(tsp(ap), c(1949, 1960 + 11 / 12, 12))), length(ap) == 144, sum(ap) == 40363)
ap_year <- 1949 + (seq_along(ap) - 1) %/% 12
ap_month <- 1 + (seq_along(ap) - 1) %% 12
write_readings("airline", sprintf("%04d-%02d-01T00:00:00Z", ap_year, ap_month),
               "airline/passengers/log", sprintf("%.6f", log(as.numeric(ap))))

# --- 4a. Beaver body temperature: datasets::beaver2, 100 readings, 10 min -----
# `day` is the day of 1990 (307 = 3 Nov, per the help page), `time` the local
# clock time hhmm. The study was in north-central Wisconsin; we take the clock
# as US Central Standard Time (UTC-06:00; 1990 daylight time ended 28 Oct), so
# UTC = local + 6 h. Value = temp (degrees C) as published, 2 decimals.
b <- datasets::beaver2
stopifnot(nrow(b) == 100, b$day[1] == 307, b$time[1] == 930,
          which(b$activ == 1)[1] == 39, all(b$activ[39:100] == 1), all(b$activ[1:38] == 0))
b_local <- as.POSIXct(sprintf("%s %02d:%02d:00", format(as.Date("1989-12-31") + b$day),
                              b$time %/% 100, b$time %% 100), tz = "UTC")
stopifnot(all(diff(as.numeric(b_local)) == 600), format(as.Date("1989-12-31") + 307) == "1990-11-03")
b_utc <- b_local + 6 * 3600
write_readings("beaver2", format(b_utc, "%Y-%m-%dT%H:%M:%SZ", tz = "UTC"), "beaver2/body/temp_c",
               sprintf("%.2f", b$temp))

# --- 4b. Seatbelts: UK car drivers killed or seriously injured, 1969-1984 -----
# datasets::UKDriverDeaths, identical to Seatbelts[, "drivers"]. One reading
# per month at the first of the month, 00:00:00Z. The law (Seatbelts[, "law"])
# is 1 from February 1983 (row 170): the compulsory-wearing law took effect on
# 31 January 1983.
ukd <- datasets::UKDriverDeaths
sb <- datasets::Seatbelts
stopifnot(isTRUE(all.equal(tsp(ukd), c(1969, 1984 + 11 / 12, 12))), length(ukd) == 192,
          all(as.numeric(sb[, "drivers"]) == as.numeric(ukd)),
          which(sb[, "law"] == 1)[1] == 170, all(sb[170:192, "law"] == 1),
          ukd[169] == 1494, ukd[170] == 1057)
sb_year <- 1969 + (seq_along(ukd) - 1) %/% 12
sb_month <- 1 + (seq_along(ukd) - 1) %% 12
write_readings("seatbelts", sprintf("%04d-%02d-01T00:00:00Z", sb_year, sb_month),
               "seatbelts/uk/drivers_ksi", sprintf("%.0f", as.numeric(ukd)))

cat("extract_r_datasets.R: wrote nile, coal, airline, beaver2, seatbelts under", out, "\n")
