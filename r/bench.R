# Speed benchmark of the R package (not a test): score a data.frame of
# 1,000,000 episodes x 20 diagnosis columns with the three default indices
# and print the best wall time of several runs.
#
#   Rscript r/bench.R [ROWS] [RUNS]
#
# Install the package with a release build first:
#   MORBUS_R_PROFILE=release R CMD INSTALL r
# The data are the repository's seeded generator's (invented; the same
# extract as benches/run.sh and python/bench.py), written once to a CSV in the
# system's temporary directory and read with data.table::fread into a plain
# data.frame of character columns.
args <- commandArgs(trailingOnly = TRUE)
rows <- if (length(args) >= 1) as.integer(args[[1]]) else 1000000L
runs <- if (length(args) >= 2) as.integer(args[[2]]) else 3L

here <- local({
  file <- sub("^--file=", "", grep("^--file=", commandArgs(), value = TRUE))
  if (length(file)) dirname(normalizePath(file)) else getwd()
})
repo <- dirname(here)

library(morbus)
if (.Call("morbus_r_debug_build", PACKAGE = "morbus")) {
  warning("the package is a debug build: install it with MORBUS_R_PROFILE=release for figures")
}

csv <- file.path(tempdir(), "..", sprintf("morbus-bench-%dx20.csv", rows))
csv <- normalizePath(csv, mustWork = FALSE)
if (!file.exists(csv)) {
  status <- system2("cargo", c(
    "run", "--quiet", "--release", "-p", "morbus-bench", "--bin", "synth",
    "--manifest-path", shQuote(file.path(repo, "Cargo.toml")), "--",
    "--episodes", rows, "--patients", (rows * 3L) %/% 10L, "--fields", 20,
    "--seed", 11, "-q", "-o", shQuote(csv)
  ))
  stopifnot(status == 0)
}
data <- data.table::fread(csv, colClasses = "character", na.strings = NULL)
data.table::setDF(data)
stopifnot(is.data.frame(data), nrow(data) == rows)
cat(sprintf("%d rows x %d columns (%d diagnosis columns), %s\n",
            nrow(data), ncol(data), length(grep("^dx", names(data))),
            paste(R.version$major, R.version$minor, sep = ".")))

times <- numeric()
for (i in seq_len(runs)) {
  gc()
  t <- system.time(scored <- score(data, dx = "dx*"))[["elapsed"]]
  times <- c(times, t)
  cat(sprintf("run %d: %.2f s\n", i, t))
}
cat(sprintf("best of %d: %.2f s (%.0f rows/s)\n", runs, min(times), rows / min(times)))
stopifnot(nrow(scored) == rows)
