# The package against the command line, on the demo data: every weighting
# and option gives the same columns and numbers.

all_specs <- "charlson:charlson1987,charlson:quan2011,charlson:count,elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018"

test_that("wide: every weighting, flags and age points equal the command line", {
  skip_without_cli()
  e <- read_demo()
  cli <- run_cli("score", demo("episodes.csv"),
                 c("--dx", "'dx*'", "--index", all_specs, "--age", "age", "--flags"))
  r <- score(e, dx = "dx*", index = all_specs, age = "age", flags = TRUE)
  cols <- score_columns(cli, names(e))
  expect_true(length(cols) > 100)
  expect_identical(names(r), c(names(e), cols))
  expect_same_scores(r, cli, cols)
  # every input column and row as it was
  expect_identical(r[names(e)], e)
  # the flags are integer 0/1
  expect_type(r$charlson_dementia, "integer")
  expect_setequal(unique(r$charlson_dementia), c(0L, 1L))
})

test_that("default indices, no hierarchy, one thread, a separator in the field", {
  skip_without_cli()
  e <- read_demo()
  for (args in list(
    list(cli = character(), r = list()),
    list(cli = "--no-hierarchy", r = list(hierarchy = FALSE)),
    list(cli = c("--threads", "1"), r = list(threads = 1))
  )) {
    cli <- run_cli("score", demo("episodes.csv"), c("--dx", "'dx*'", args$cli))
    r <- do.call(score, c(list(e, dx = "dx*"), args$r))
    expect_same_scores(r, cli, score_columns(cli, names(e)))
  }
  # several codes in one field
  joined <- data.frame(
    episode_id = e$episode_id,
    codes = apply(e[paste0("dx", 1:20)], 1, function(x) paste(x[x != ""], collapse = "|"))
  )
  path <- tempfile(fileext = ".csv")
  write.csv(joined, path, row.names = FALSE)
  cli <- run_cli("score", path, c("--dx", "codes", "--dx-sep", "'|'"))
  r <- score(joined, dx = "codes", dx_sep = "|")
  expect_same_scores(r, cli, score_columns(cli, names(joined)))
  plain <- score(e, dx = "dx*")
  expect_identical(r$charlson_quan2011, plain$charlson_quan2011)
})

test_that("lookback with Date and text dates, exclusions, whole history", {
  skip_without_cli()
  e <- read_demo()
  d <- e
  d$admission_date <- as.Date(d$admission_date)
  for (lb in c("365", "all")) {
    for (excl in c(FALSE, TRUE)) {
      args <- c("--dx", "'dx*'", "--id", "patient_id", "--date", "admission_date",
                "--lookback", lb, "--index", all_specs, "--age", "age")
      if (excl) args <- c(args, "--exclude-primary")
      cli <- run_cli("score", demo("episodes.csv"), args)
      lookback <- if (lb == "all") "all" else as.numeric(lb)
      r <- score(d, dx = "dx*", id = "patient_id", date = "admission_date",
                 lookback = lookback, index = all_specs, age = "age",
                 exclude_primary = excl)
      expect_same_scores(r, cli, score_columns(cli, names(e)))
      # text dates give the same
      t <- score(e, dx = "dx*", id = "patient_id", date = "admission_date",
                 lookback = lookback, index = all_specs, age = "age",
                 exclude_primary = excl)
      expect_identical(t[score_columns(cli, names(e))], r[score_columns(cli, names(e))])
    }
  }
})

test_that("long layout: episodes, lookback, primary, present on admission", {
  skip_without_cli()
  l <- read_demo("episodes-long.csv")
  cases <- list(
    list(cli = c("--id", "episode_id"), r = list(id = "episode_id")),
    list(cli = c("--id", "patient_id", "--episode", "episode_id", "--age", "age"),
         r = list(id = "patient_id", episode = "episode_id", age = "age")),
    list(cli = c("--id", "patient_id", "--episode", "episode_id", "--date", "admission_date",
                 "--lookback", "730", "--exclude-primary", "--primary", "position",
                 "--poa", "present_on_admission", "--poa-values", "Y,W"),
         r = list(id = "patient_id", episode = "episode_id", date = "admission_date",
                  lookback = 730, exclude_primary = TRUE, primary = "position",
                  poa = "present_on_admission", poa_values = c("Y", "W")))
  )
  for (case in cases) {
    cli <- run_cli("score", demo("episodes-long.csv"),
                   c("--layout", "long", "--dx", "code", "--index", all_specs, case$cli))
    r <- do.call(score, c(list(l, dx = "code", layout = "long", index = all_specs), case$r))
    keys <- c(case$r$id, case$r$episode)
    expect_identical(names(r), names(cli))
    for (k in keys) expect_identical(as.character(r[[k]]), cli[[k]])
    expect_same_scores(r, cli, setdiff(names(cli), keys))
  }
  # the long and wide layouts of the demo data give the same scores
  e <- read_demo()
  wide <- score(e, dx = "dx*")
  long <- score(l, dx = "code", layout = "long", id = "episode_id")
  m <- match(wide$episode_id, long$episode_id)
  expect_identical(long$charlson_quan2011[m], wide$charlson_quan2011)
  expect_identical(long$hfrs_gilbert2018[m], wide$hfrs_gilbert2018)
})

test_that("explain equals the command line's", {
  skip_without_cli()
  e <- read_demo()
  d <- e
  d$admission_date <- as.Date(d$admission_date)
  cli <- run_cli("explain", demo("episodes.csv"),
                 c("--dx", "'dx*'", "--id", "patient_id", "--date", "admission_date",
                   "--lookback", "365", "--age", "age"))
  r <- explain(d, dx = "dx*", id = "patient_id", date = "admission_date",
               lookback = 365, age = "age")
  expect_identical(names(r), names(cli))
  expect_identical(r$patient_id, cli$patient_id)
  expect_identical(r$row, as.integer(cli$row))
  expect_identical(format(r$source_date), ifelse(cli$source_date == "", NA, cli$source_date))
  for (col in c("index", "code_as_written", "code", "condition", "status")) {
    want <- cli[[col]]
    if (col != "index" && col != "status") want[want == ""] <- NA
    expect_identical(r[[col]], want, info = col)
  }
  expect_type(r$weight, "double")
  expect_identical(r$weight, as.numeric(cli$weight))
  # whole weights are integers
  w <- explain(e[1:5, ], dx = "dx*", index = "charlson:charlson1987")
  expect_type(w$weight, "integer")
})

test_that("windows per list and earlier episodes only equal the command line's", {
  skip_without_cli()
  e <- read_demo()
  d <- e
  d$admission_date <- as.Date(d$admission_date)
  cases <- list(
    list(cli = c("--lookback", "charlson=365,hfrs=730"),
         r = list(lookback = c(charlson = 365, hfrs = 730))),
    list(cli = c("--lookback", "365,hfrs=all", "--window", "earlier-only"),
         r = list(lookback = "365,hfrs=all", window = "earlier-only")),
    list(cli = c("--lookback", "730", "--window", "earlier-only"),
         r = list(lookback = 730, window = "earlier-only"))
  )
  for (case in cases) {
    cli <- run_cli("score", demo("episodes.csv"),
                   c("--dx", "'dx*'", "--id", "patient_id", "--date", "admission_date",
                     "--age", "age", case$cli))
    r <- do.call(score, c(list(d, dx = "dx*", id = "patient_id", date = "admission_date",
                               age = "age"), case$r))
    expect_same_scores(r, cli, score_columns(cli, names(e)))
  }
  # the windows change the numbers: earlier-only differs from the default
  a <- score(d, dx = "dx*", id = "patient_id", date = "admission_date", lookback = 730)
  b <- score(d, dx = "dx*", id = "patient_id", date = "admission_date", lookback = 730,
             window = "earlier-only")
  expect_false(identical(a$charlson_quan2011, b$charlson_quan2011))
  err <- tryCatch(score(d, dx = "dx*", id = "patient_id", date = "admission_date",
                        lookback = c(nolist = 30)), morbus_usage_error = function(e) e)
  expect_s3_class(err, "morbus_usage_error")
  expect_identical(conditionMessage(err),
                   cli_error("score", demo("episodes.csv"),
                             c("--dx", "'dx*'", "--id", "patient_id", "--date",
                               "admission_date", "--lookback", "nolist=30"))$message)
})

test_that("keep (long layout) and explain's label equal the command line's, typed", {
  skip_without_cli()
  l <- read_demo("episodes-long.csv")
  l$admission_date <- as.Date(l$admission_date)
  # a unit whose first row has no value takes its first non-empty one
  l$died_within_30_days[1] <- NA
  path <- tempfile(fileext = ".csv")
  write.csv(l, path, row.names = FALSE, na = "")
  cli <- run_cli("score", path,
                 c("--layout", "long", "--dx", "code", "--id", "patient_id",
                   "--episode", "episode_id", "--keep", "admission_date,died_within_30_days"))
  r <- score(l, dx = "code", layout = "long", id = "patient_id", episode = "episode_id",
             keep = c("admission_date", "died_within_30_days"))
  expect_identical(names(r), names(cli))
  expect_s3_class(r$admission_date, "Date")
  expect_type(r$died_within_30_days, "integer")
  expect_identical(format(r$admission_date), cli$admission_date)
  expect_identical(as.character(r$died_within_30_days), cli$died_within_30_days)
  expect_same_scores(r, cli, setdiff(names(cli), c("patient_id", "episode_id",
                                                   "admission_date", "died_within_30_days")))
  err <- tryCatch(score(l, dx = "code", keep = "age"), morbus_usage_error = function(e) e)
  expect_identical(conditionMessage(err),
                   cli_error("score", path, c("--dx", "code", "--keep", "age"))$message)

  e <- read_demo()
  cli <- run_cli("explain", demo("episodes.csv"),
                 c("--dx", "'dx*'", "--id", "patient_id", "--label", "episode_id"))
  x <- explain(e, dx = "dx*", id = "patient_id", label = "episode_id")
  expect_identical(names(x), names(cli))
  expect_identical(x$episode_id, cli$episode_id)
  expect_identical(x$row, as.integer(cli$row))
})
