# Column types, NA, factors, data.table, generated extracts.

test_that("factors, NA and character give the same scores", {
  e <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
  f <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"),
                stringsAsFactors = TRUE)
  n <- e
  for (k in paste0("dx", 1:20)) n[[k]][n[[k]] == ""] <- NA
  a <- score(e, dx = "dx*", age = "age", flags = TRUE)
  b <- score(f, dx = "dx*", age = "age", flags = TRUE)
  c <- score(n, dx = "dx*", age = "age", flags = TRUE)
  cols <- setdiff(names(a), names(e))
  expect_identical(b[cols], a[cols])
  expect_identical(c[cols], a[cols])
  # the input's columns come back as given (factors stay factors)
  expect_identical(b[names(f)], f)
  # an all-NA (logical) diagnosis column is an empty one
  n$dx20 <- NA
  expect_type(n$dx20, "logical")
  expect_identical(score(n, dx = "dx*")$charlson_quan2011, score(e, dx = "dx*")$charlson_quan2011)
})

test_that("ages as integer, double and text; missing ages give NA", {
  e <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
  a <- score(e, dx = "dx*", age = "age", index = "charlson")
  e2 <- e
  e2$age <- as.character(e$age)
  e3 <- e
  e3$age <- as.double(e$age) + 0.5   # decimals are truncated
  expect_identical(score(e2, dx = "dx*", age = "age", index = "charlson")$charlson_quan2011_age,
                   a$charlson_quan2011_age)
  expect_identical(score(e3, dx = "dx*", age = "age", index = "charlson")$charlson_quan2011_age,
                   a$charlson_quan2011_age)
  expect_identical(is.na(a$charlson_quan2011_age), is.na(e$age))
})

test_that("Date, POSIXct and text dates give the same history", {
  e <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
  text <- score(e, dx = "dx*", id = "patient_id", date = "admission_date", lookback = 365)
  d <- e
  d$admission_date <- as.Date(e$admission_date)
  p <- e
  p$admission_date <- as.POSIXct(paste(e$admission_date, "23:30:00"), tz = "Pacific/Auckland")
  u <- e
  u$admission_date <- format(as.Date(e$admission_date), "%d/%m/%Y")
  cols <- setdiff(names(text), names(e))
  expect_identical(score(d, dx = "dx*", id = "patient_id", date = "admission_date",
                         lookback = 365)[cols], text[cols])
  expect_identical(score(p, dx = "dx*", id = "patient_id", date = "admission_date",
                         lookback = 365)[cols], text[cols])
  expect_identical(score(u, dx = "dx*", id = "patient_id", date = "admission_date",
                         lookback = 365, date_format = "%d/%m/%Y")[cols], text[cols])
})

test_that("a data.table comes back as a data.table with the same numbers", {
  skip_if_not_installed("data.table")
  e <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
  dt <- data.table::as.data.table(e)
  a <- score(e, dx = "dx*", age = "age")
  b <- score(dt, dx = "dx*", age = "age")
  expect_s3_class(b, "data.table")
  expect_identical(as.data.frame(b), a)
  l <- data.table::fread(system.file("extdata", "episodes-long.csv", package = "morbus"))
  lo <- score(l, dx = "code", layout = "long", id = "patient_id", episode = "episode_id")
  expect_s3_class(lo, "data.table")
  expect_equal(nrow(lo), length(unique(l$episode_id)))
  # the input is not changed
  expect_identical(names(dt), names(e))
})

test_that("provenance is a list with the run's counts", {
  e <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
  s <- score(e, dx = "dx*", provenance = TRUE)
  p <- provenance(s)
  expect_type(p, "list")
  expect_identical(p$rows$read, nrow(e))
  expect_identical(vapply(p$lists, `[[`, "", "name"), c("charlson", "elixhauser", "hfrs"))
  expect_null(provenance(score(e, dx = "dx*")))
})

test_that("generated extracts equal the command line, every weighting and layout", {
  skip_without_cli()
  set.seed(20261203)
  pool <- c("I21.9", "I50", "E11.2", "E119", "C78.0", "C20", "F00.9", "G30", "N18.4",
            "J44.0", "K70.3", "B20", "I10", "R41.0", "W19", "Z74.1", "i25.2", "M05.9",
            "K25.0", "E66", "F32", "D68.4", "", "", "", "x1", "??", "I2", NA)
  n <- 3000
  g <- data.frame(
    patient = sprintf("G%04d", sample(400, n, replace = TRUE)),
    day = as.Date("2023-01-01") + sample(0:900, n, replace = TRUE),
    age = sample(c(20:99, NA), n, replace = TRUE),
    stringsAsFactors = FALSE
  )
  for (k in 1:8) g[[paste0("code", k)]] <- sample(pool, n, replace = TRUE)
  for (k in 1:8) g[[paste0("poa", k)]] <- sample(c("Y", "N", "U", "W", "1", "", "E"), n, replace = TRUE)
  path <- tempfile(fileext = ".csv")
  write.csv(g, path, row.names = FALSE, na = "")
  all_specs <- "charlson:charlson1987,charlson:quan2011,charlson:count,elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018"
  for (case in list(
    list(cli = character(), r = list()),
    list(cli = c("--id", "patient", "--date", "day", "--lookback", "180"),
         r = list(id = "patient", date = "day", lookback = 180)),
    list(cli = c("--id", "patient", "--date", "day", "--lookback", "all", "--exclude-primary"),
         r = list(id = "patient", date = "day", lookback = "all", exclude_primary = TRUE)),
    # present on admission, wide: one indicator column per diagnosis column
    list(cli = c("--poa", "'poa*'"), r = list(poa = "poa*")),
    list(cli = c("--poa", "'poa*'", "--poa-values", "Y,W,blank", "--id", "patient", "--date", "day",
                 "--lookback", "365"),
         r = list(poa = "poa*", poa_values = c("Y", "W", "blank"), id = "patient", date = "day",
                  lookback = 365))
  )) {
    cli <- run_cli("score", path, c("--dx", "'code*'", "--index", all_specs, "--age", "age",
                                    "--flags", case$cli))
    r <- do.call(score, c(list(g, dx = "code*", index = all_specs, age = "age", flags = TRUE),
                          case$r))
    expect_same_scores(r, cli, score_columns(cli, names(g)))
  }
  # the same extract in the long layout, one code per row
  long <- do.call(rbind, lapply(1:8, function(k) {
    data.frame(row = seq_len(n), patient = g$patient, day = g$day, age = g$age,
               position = k, code = g[[paste0("code", k)]])
  }))
  long <- long[order(long$row, long$position), ]
  lpath <- tempfile(fileext = ".csv")
  write.csv(long, lpath, row.names = FALSE, na = "")
  cli <- run_cli("score", lpath, c("--layout", "long", "--dx", "code", "--id", "patient",
                                   "--episode", "row", "--date", "day", "--lookback", "365",
                                   "--index", all_specs, "--age", "age"))
  r <- score(long, dx = "code", layout = "long", id = "patient", episode = "row",
             date = "day", lookback = 365, index = all_specs, age = "age")
  expect_identical(r$patient, cli$patient)
  expect_same_scores(r, cli, setdiff(names(cli), c("patient", "row")))
})
