# Errors are R conditions with the command line's messages.

test_that("a missing column lists the columns, as on the command line", {
  skip_without_cli()
  e <- read_demo()
  err <- tryCatch(score(e, dx = "diag*"), morbus_usage_error = function(c) c)
  expect_s3_class(err, "morbus_error")
  cli <- cli_error("score", demo("episodes.csv"), c("--dx", "'diag*'"))
  expect_identical(cli$status, 2L)
  expect_identical(conditionMessage(err), cli$message)
  expect_match(conditionMessage(err), "columns in the input: episode_id, patient_id")
  err <- tryCatch(score(e, dx = "dx*", age = "years"), morbus_usage_error = function(c) c)
  expect_identical(conditionMessage(err),
                   cli_error("score", demo("episodes.csv"), c("--dx", "'dx*'", "--age", "years"))$message)
})

test_that("an unknown list or weighting lists the valid ones", {
  skip_without_cli()
  e <- read_demo()
  for (spec in c("charlsen", "charlson:quan1999")) {
    err <- tryCatch(score(e, dx = "dx*", index = spec), morbus_usage_error = function(c) c)
    cli <- cli_error("score", demo("episodes.csv"), c("--dx", "'dx*'", "--index", spec))
    expect_identical(conditionMessage(err), cli$message)
  }
  expect_match(conditionMessage(err), "quan2011")
})

test_that("strict stops at the first invalid code with its row", {
  d <- data.frame(dx1 = c("I21.9", "E11.2", "not a code"), dx2 = c("", "??", "I50"))
  err <- tryCatch(score(d, dx = "dx*", strict = TRUE), morbus_strict_error = function(c) c)
  expect_s3_class(err, "morbus_error")
  expect_identical(err$exit_code, 3L)
  # rows are numbered from 1, as R numbers them
  expect_identical(conditionMessage(err), "row 2: invalid code '??' in column 'dx2' (--strict)")
  # without strict the invalid codes are counted in the provenance
  p <- provenance(score(d, dx = "dx*", provenance = TRUE))
  expect_identical(p$codes$invalid, 2L)
})

test_that("options that do not fit are usage errors", {
  d <- data.frame(dx1 = "I21", n = 410L, when = "2024-01-01")
  expect_error(score(d, dx = "n"), class = "morbus_usage_error",
               regexp = "'n' holds integer values")
  expect_error(score(d, dx = "dx1", layout = "long"), class = "morbus_usage_error",
               regexp = "--layout long needs --id")
  expect_error(score(d, dx = "dx1", id = "n", date = "when", lookback = "soon"),
               class = "morbus_usage_error", regexp = "whole number of days")
  expect_error(score(d, dx = "dx1", date = "when"), class = "morbus_usage_error",
               regexp = "--date is used with --lookback")
  expect_error(score(d, dx = "dx1", lookback = 30), class = "morbus_usage_error",
               regexp = "--lookback needs --id")
  expect_error(score(list(dx1 = "I21"), dx = "dx1"), class = "morbus_usage_error")
  expect_error(score(d, dx = "dx1", flags = "yes"), class = "morbus_usage_error")
  d$charlson_quan2011 <- 1L
  expect_error(score(d, dx = "dx1"), class = "morbus_usage_error", regexp = "already exists")
})
