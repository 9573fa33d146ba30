# code_lists() and load_lists(): the catalogue the command line shows.

test_that("code_lists has the built-in lists and their weightings", {
  skip_without_cli()
  t <- code_lists()
  cli <- system2(cli_bin(), "lists", stdout = TRUE)
  for (k in seq_len(nrow(t))) {
    line <- grep(paste0("^", t$name[k], " "), cli, value = TRUE)
    expect_length(line, 1)
    expect_match(line, t$version[k], fixed = TRUE)
    expect_match(line, substr(t$checksum[k], 1, 12), fixed = TRUE)
    expect_match(line, paste0(t$default_weighting[k], " (default)"), fixed = TRUE)
  }
})

test_that("a directory of lists adds an index of one's own", {
  skip_without_cli()
  dir <- file.path(tempdir(), "lists-test")
  dir.create(dir, showWarnings = FALSE)
  status <- system2(cli_bin(), c("lists", "export", "charlson", shQuote(dir), "--force"),
                    stdout = FALSE, stderr = FALSE)
  expect_identical(status, 0L)
  mine <- load_lists(dir)
  expect_s3_class(mine, "morbus_lists")
  expect_match(mine$notes, "replaces the built-in", all = FALSE)
  e <- read_demo()
  a <- score(e, dx = "dx*", lists = mine)
  b <- score(e, dx = "dx*")
  expect_identical(a$charlson_quan2011, b$charlson_quan2011)
  expect_identical(code_lists(mine)$checksum, code_lists()$checksum)
  expect_error(load_lists(file.path(dir, "none")), class = "morbus_usage_error")
})
