# Helpers: the morbus command line the package is compared with, and the
# demo data of the repository.
#
# MORBUS_BIN names the command line (tests/run-all.sh builds it); without it
# the workspace's target/debug/morbus is used. MORBUS_REPO names the
# repository (default: three levels up from this directory, r/tests/testthat).

repo_dir <- function() {
  r <- Sys.getenv("MORBUS_REPO")
  if (nzchar(r)) r else normalizePath(file.path("..", "..", ".."), mustWork = FALSE)
}

cli_bin <- function() {
  b <- Sys.getenv("MORBUS_BIN")
  if (nzchar(b)) b else file.path(repo_dir(), "target", "debug", "morbus")
}

skip_without_cli <- function() {
  if (!file.exists(cli_bin())) {
    skip(paste("the morbus command line is not built:", cli_bin()))
  }
}

demo <- function(name) file.path(repo_dir(), "demo-data", name)

# Runs the command line; returns its standard output as a data frame of
# text ("" for an empty field), or stops with its standard error.
run_cli <- function(command, input, args) {
  out <- tempfile(fileext = ".csv")
  err <- tempfile()
  on.exit(unlink(c(out, err)))
  status <- system2(cli_bin(), c(command, shQuote(input), args, "-q", "-o", out),
                    stdout = FALSE, stderr = err)
  if (status != 0) {
    stop(paste(readLines(err), collapse = "\n"))
  }
  read.csv(out, colClasses = "character", na.strings = character(),
           check.names = FALSE, encoding = "UTF-8")
}

# The command line's error message (without its "morbus: error: " prefix)
# and exit code.
cli_error <- function(command, input, args) {
  err <- tempfile()
  on.exit(unlink(err))
  status <- suppressWarnings(system2(cli_bin(), c(command, shQuote(input), args, "-q"),
                                     stdout = FALSE, stderr = err))
  list(status = status, message = sub("^morbus: error: ", "", readLines(err)[1]))
}

# Every score column of `cli` equals the same column of `r`, with the types
# the package promises: integer scores and flags as integer, decimal scores
# as double, bands as character; empty fields as NA.
expect_same_scores <- function(r, cli, columns) {
  expect_true(length(columns) > 0)
  expect_equal(nrow(r), nrow(cli))
  for (col in columns) {
    expect_true(col %in% names(r), info = col)
    got <- r[[col]]
    want <- cli[[col]]
    want[want == ""] <- NA
    if (grepl("_band$", col)) {
      expect_type(got, "character")
      expect_identical(got, want, info = col)
    } else {
      if (any(grepl(".", want, fixed = TRUE))) {
        expect_type(got, "double")
      } else {
        expect_type(got, "integer")
      }
      expect_identical(as.numeric(got), as.numeric(want), info = col)
    }
  }
}

# The score columns of a command-line output: those after the input's.
score_columns <- function(cli, input_names) setdiff(names(cli), input_names)

read_demo <- function(name = "episodes.csv", ...) {
  read.csv(demo(name), encoding = "UTF-8", ...)
}
