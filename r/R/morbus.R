#' morbus: comorbidity and frailty covariates from ICD-10 diagnosis fields
#'
#' Adds published comorbidity and frailty covariates (Charlson, Elixhauser,
#' Hospital Frailty Risk Score) to a data frame of hospital episodes or
#' claims, per episode or per patient, from the current admission alone or
#' with the same patient's earlier admissions (lookback). The package is a
#' thin layer over the Rust library of the morbus project: the numbers,
#' options and messages are those of the `morbus` command line.
#'
#' The main functions: [score()], [explain()], [code_lists()],
#' [load_lists()], [provenance()].
#'
#' These indices support population-level risk adjustment and research, not
#' decisions about an individual patient. The code lists must be reviewed
#' against local coding standards before results are relied on.
#'
#' @keywords internal
#' @useDynLib morbus, .registration = TRUE
"_PACKAGE"

# Calls an entry point of the Rust library and raises its error, if any, as
# a condition of class `morbus_usage_error` (exit code 2 on the command
# line), `morbus_data_error` (1) or `morbus_strict_error` (3), each also of
# class `morbus_error`.
call_native <- function(fn, ..., call = sys.call(-1)) {
  res <- .Call(fn, ...)
  exit <- attr(res, "morbus_exit", exact = TRUE)
  if (is.character(res) && !is.null(exit)) {
    kind <- switch(as.character(exit),
      "1" = "morbus_data_error",
      "2" = "morbus_usage_error",
      "3" = "morbus_strict_error",
      "morbus_data_error"
    )
    cond <- structure(
      class = c(kind, "morbus_error", "error", "condition"),
      list(message = res[[1]], call = call, exit_code = as.integer(exit))
    )
    stop(cond)
  }
  res
}

usage_error <- function(message, call = sys.call(-1)) {
  stop(structure(
    class = c("morbus_usage_error", "morbus_error", "error", "condition"),
    list(message = message, call = call, exit_code = 2L)
  ))
}

# One optional text argument, as the library takes it.
one_text <- function(x, name) {
  if (is.null(x)) {
    return(NULL)
  }
  if (is.factor(x)) x <- as.character(x)
  if (is.numeric(x) && length(x) == 1 && !is.na(x)) x <- format(x, scientific = FALSE)
  if (!is.character(x) || length(x) != 1 || is.na(x)) {
    usage_error(sprintf("%s must be one character string (or NULL)", name), sys.call(-2))
  }
  x
}

texts <- function(x, name) {
  if (is.null(x)) {
    return(character())
  }
  if (!is.character(x) || anyNA(x)) {
    usage_error(sprintf("%s must be a character vector", name), sys.call(-2))
  }
  x
}

switch_value <- function(x, name) {
  if (!is.logical(x) || length(x) != 1 || is.na(x)) {
    usage_error(sprintf("%s must be TRUE or FALSE", name), sys.call(-2))
  }
  x
}

# The directory of a `lists` argument: NULL, a directory, or load_lists().
lists_dir <- function(lists) {
  if (is.null(lists)) {
    return(NULL)
  }
  if (inherits(lists, "morbus_lists")) {
    return(lists$path)
  }
  one_text(lists, "lists")
}

# The columns of a data frame as the library reads them: date-times become
# dates in their own time zone (the day shown), POSIXlt first becomes
# POSIXct.
frame_columns <- function(data) {
  if (!is.data.frame(data)) {
    usage_error("data must be a data.frame (or a data.table)", sys.call(-2))
  }
  cols <- as.list(data)
  names(cols) <- NULL
  for (k in seq_along(cols)) {
    x <- cols[[k]]
    if (inherits(x, "POSIXlt")) x <- as.POSIXct(x)
    if (inherits(x, "POSIXct")) {
      tz <- attr(x, "tzone", exact = TRUE)
      if (is.null(tz) || identical(tz[[1]], "")) tz <- ""
      cols[[k]] <- as.Date(x, tz = tz[[1]])
    }
  }
  cols
}

# The command line's `--lookback` text of a `lookback` argument: days, "all",
# "charlson=365,hfrs=730", or a named vector or list of days per list (an
# unnamed element, or the name "*", is the window of the lists not named).
lookback_text <- function(x) {
  if (is.null(x)) {
    return(NULL)
  }
  if (is.list(x)) x <- unlist(x)
  nm <- names(x)
  if (length(x) > 1 || (!is.null(nm) && nzchar(nm[[1]]))) {
    if (anyNA(x)) usage_error("lookback must not hold NA", sys.call(-2))
    days <- if (is.numeric(x)) format(x, scientific = FALSE, trim = TRUE) else as.character(x)
    if (is.null(nm)) nm <- rep("", length(x))
    parts <- ifelse(nm == "" | nm == "*", days, paste0(nm, "=", days))
    return(paste(parts, collapse = ","))
  }
  one_text(x, "lookback")
}

options_list <- function(dx, index, age, id, date, lookback, episode, layout,
                         flags, hierarchy, strict, threads, dx_sep,
                         date_format, exclude_primary, primary, poa,
                         poa_values, max_unreadable_dates, window = NULL,
                         edition = NULL, keep = NULL, label = NULL) {
  if (is.null(dx)) usage_error("dx is required: the diagnosis columns (names and/or globs such as \"dx*\")", sys.call(-1))
  if (!is.numeric(threads) || length(threads) != 1 || is.na(threads) || threads < 0) {
    usage_error("threads must be a whole number, 0 for one per core", sys.call(-1))
  }
  list(
    dx = texts(dx, "dx"),
    index = texts(index, "index"),
    age = one_text(age, "age"),
    id = one_text(id, "id"),
    date = one_text(date, "date"),
    lookback = lookback_text(lookback),
    window = one_text(window, "window"),
    edition = one_text(edition, "edition"),
    keep = texts(keep, "keep"),
    label = one_text(label, "label"),
    episode = one_text(episode, "episode"),
    layout = one_text(layout, "layout"),
    flags = switch_value(flags, "flags"),
    hierarchy = switch_value(hierarchy, "hierarchy"),
    strict = switch_value(strict, "strict"),
    threads = as.integer(threads),
    dx_sep = one_text(dx_sep, "dx_sep"),
    date_format = one_text(date_format, "date_format"),
    exclude_primary = switch_value(exclude_primary, "exclude_primary"),
    primary = one_text(primary, "primary"),
    poa = one_text(poa, "poa"),
    poa_values = texts(poa_values, "poa_values"),
    max_unreadable_dates = one_text(max_unreadable_dates, "max_unreadable_dates")
  )
}

# A frame of the class of `like` from a list of equal-length columns.
frame_like <- function(cols, like) {
  n <- if (length(cols)) length(cols[[1]]) else 0L
  out <- structure(cols, class = "data.frame", row.names = .set_row_names(n))
  if (inherits(like, "data.table")) {
    out <- data.table::setDT(out)
  } else if (!identical(class(like), "data.frame")) {
    class(out) <- class(like)
  }
  out
}

# Every column of `data` followed by `cols`, in the class of `data`.
add_columns <- function(data, cols) {
  all <- c(as.list(data), cols)
  out <- frame_like(all, data)
  if (!inherits(data, "data.table") && !is.null(attr(data, "row.names")) &&
      is.character(attr(data, "row.names"))) {
    attr(out, "row.names") <- attr(data, "row.names")
  }
  out
}

#' Add comorbidity and frailty scores to a data frame
#'
#' The R form of `morbus score`: every option of the command line, with the
#' same column names and numbers. Wide layout: every input row and column,
#' in order, followed by the score columns. Long layout (one code per row):
#' one row per unit (episode, or id without `episode`), in order of first
#' appearance, with the id (and episode) column and the score columns.
#'
#' Output columns, after the input's: `<list>_<weighting>` (the score;
#' integer for weightings without decimals, double for the frailty score),
#' `<list>_<weighting>_age` with `age` for lists with age points (`NA` when
#' the age is missing or unreadable), `<list>_<weighting>_band` (character:
#' `low`, `intermediate`, `high` for the frailty score) and, with
#' `flags = TRUE`, an integer 0/1 column `<list>_<condition>` per condition.
#'
#' Columns may be character, factor, integer, double, logical (all `NA`),
#' `Date` or `POSIXct` (read as the date in its own time zone); `NA` is an
#' empty field. Diagnosis columns must hold text (character or factor).
#'
#' @param data A `data.frame` or `data.table` (the result has the same
#'   class).
#' @param dx Diagnosis columns: a character vector of names and/or globs
#'   (`"dx*"`), each of which may hold several, comma-separated.
#' @param index Index specifications `"list:weighting"` (a bare list name
#'   takes its default weighting), a character vector or one comma-separated
#'   string; `NULL` for the default
#'   `charlson:quan2011,elixhauser:vanwalraven2009,hfrs:gilbert2018`. See
#'   [code_lists()].
#' @param age Age column (whole years): adds the age variant of lists with
#'   age points.
#' @param id Id column: the patient (with `lookback`) or the unit of a long
#'   extract.
#' @param date Episode date column (with `lookback`): `Date`, `POSIXct` or
#'   text (`YYYY-MM-DD`, or `date_format`).
#' @param lookback Days (a number) or `"all"`: score each episode from the
#'   same patient's episodes dated within that many days before it and
#'   itself. One window per list: a named vector such as
#'   `c(charlson = 365, hfrs = 730)` or the command line's text
#'   `"charlson=365,hfrs=730"` (an unnamed element is the window of the
#'   lists not named; lists without a window are scored from the episode
#'   alone). Column names do not change.
#' @param window `"current-and-earlier"` (the default) or `"earlier-only"`:
#'   only the patient's episodes dated before the episode's own day count
#'   (its own codes and those of its other episodes of the same day are
#'   left out), as `--window` on the command line. Needs `lookback`.
#' @param edition `"who"` (WHO ICD-10 2019), `"cm"` (ICD-10-CM, April 2026)
#'   or `"any"` (default): the code sets in which codes are looked up;
#'   unknown and extended codes are counted in the summary and provenance.
#' @param episode Long layout: column grouping code rows into episodes.
#' @param layout `"wide"` (one row per episode) or `"long"` (one code per
#'   row).
#' @param flags `TRUE` adds a 0/1 column per condition.
#' @param hierarchy `FALSE` switches the lists' hierarchies off.
#' @param lists Code lists: `NULL` (built-ins), a directory of list files or
#'   the result of [load_lists()].
#' @param strict `TRUE` stops with an error (class `morbus_strict_error`) at
#'   the first warning: an invalid code, an unreadable age or date.
#' @param threads Worker threads for the wide layout (0: one per core).
#' @param provenance `TRUE` attaches the provenance record (tool, lists with
#'   versions and checksums, options, counts) as the attribute
#'   `"provenance"`; read it with [provenance()].
#' @param dx_sep A character splitting a diagnosis field holding several
#'   codes.
#' @param date_format Date pattern for text dates, e.g. `"\%d/\%m/\%Y"`.
#' @param exclude_primary `TRUE` leaves out the primary diagnosis of the
#'   episode being scored (wide: the first diagnosis column; long: the rows
#'   flagged by `primary`).
#' @param primary Long layout: column flagging the primary-diagnosis row.
#' @param poa Present-on-admission indicator column (long layout), or
#'   columns paired in order with the diagnosis columns (wide layout: names
#'   or a glob such as `"poa*"`); codes of the episode being scored count
#'   only when their indicator is one of `poa_values`.
#' @param poa_values Present-on-admission values that count, a character
#'   vector (`"blank"` for an empty field); `NULL` for the command line's
#'   default, `Y`, `W`, `1` and blank.
#' @param max_unreadable_dates Stop (`morbus_data_error`) when more than this
#'   percentage of the non-empty episode dates cannot be read.
#' @param keep Long layout: columns carried into each output row after the
#'   id and episode columns, as `--keep` on the command line: the unit's
#'   first non-empty value, with the column's type; units whose rows give
#'   other values are counted in the summary (`rows$disagreeing_units` of
#'   the provenance), as for date and age, and stop a `strict` run.
#' @param quiet `FALSE` shows the run's summary as a message.
#' @return A data frame of the class of `data` (see Details).
#' @section Errors: conditions of class `morbus_usage_error` (options,
#'   missing columns, unknown lists or weightings: the message lists the
#'   valid ones), `morbus_data_error` (data that cannot be read) and
#'   `morbus_strict_error`, all of class `morbus_error`, with the command
#'   line's messages. Rows in messages are numbered from 1.
#' @examples
#' episodes <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
#' scored <- score(episodes, dx = "dx*", age = "age")
#' head(scored[, c("episode_id", "charlson_quan2011", "charlson_quan2011_age",
#'                 "hfrs_gilbert2018", "hfrs_gilbert2018_band")])
#'
#' # choose indices; add a 0/1 column per condition; keep the provenance
#' flagged <- score(episodes, dx = "dx*", index = c("charlson:charlson1987", "hfrs"),
#'                  flags = TRUE, provenance = TRUE)
#' provenance(flagged)$lists[[1]]$version
#'
#' # patient history: each episode from the patient's episodes of the past year
#' episodes$admission_date <- as.Date(episodes$admission_date)
#' history <- score(episodes, dx = "dx*", id = "patient_id",
#'                  date = "admission_date", lookback = 365)
#'
#' # one window per list, earlier episodes only
#' prior <- score(episodes, dx = "dx*", id = "patient_id", date = "admission_date",
#'                lookback = c(charlson = 365, hfrs = 730), window = "earlier-only")
#'
#' # long layout: one code per row, one output row per episode
#' codes <- read.csv(system.file("extdata", "episodes-long.csv", package = "morbus"))
#' per_episode <- score(codes, dx = "code", layout = "long", id = "patient_id",
#'                      episode = "episode_id", keep = "admission_date")
#' @export
score <- function(data, dx, index = NULL, age = NULL, id = NULL, date = NULL,
                  lookback = NULL, episode = NULL, layout = "wide",
                  flags = FALSE, hierarchy = TRUE, lists = NULL,
                  strict = FALSE, threads = 0L, provenance = FALSE,
                  dx_sep = NULL, date_format = NULL, exclude_primary = FALSE,
                  primary = NULL, poa = NULL, poa_values = NULL,
                  max_unreadable_dates = 1, quiet = TRUE, window = NULL,
                  keep = NULL, edition = NULL) {
  opts <- options_list(
    dx, index, age, id, date, lookback, episode, layout, flags, hierarchy,
    strict, threads, dx_sep, date_format, exclude_primary, primary, poa,
    poa_values, max_unreadable_dates, window, edition, keep
  )
  switch_value(provenance, "provenance")
  switch_value(quiet, "quiet")
  cols <- frame_columns(data)
  res <- call_native(
    "morbus_r_score", cols, as.character(names(data)), opts, lists_dir(lists),
    call = sys.call()
  )
  if (!quiet) message(res$report)
  if (identical(opts$layout, "long")) {
    units <- c(opts$id, opts$episode)
    kept <- lapply(as.list(data)[units], function(x) x[res$first_rows])
    # kept columns: the row whose value each unit carries (NA: none)
    names(res$kept_rows) <- unlist(strsplit(opts$keep, ",", fixed = TRUE))
    names(res$kept_rows) <- trimws(names(res$kept_rows))
    carried <- Map(function(name, rows) data[[name]][rows], names(res$kept_rows), res$kept_rows)
    out <- frame_like(c(kept, carried, res$columns), data)
  } else {
    out <- add_columns(data, res$columns)
  }
  if (provenance) attr(out, "provenance") <- res$provenance
  out
}

#' How each score comes about, code by code
#'
#' The R form of `morbus explain`: one row per (episode, matched code,
#' index, condition) with its status (`counted`, `repeated`,
#' `superseded_by:<condition>`, `excluded:primary_diagnosis`,
#' `excluded:not_present_on_admission`), then a `total` row per episode and
#' index (and `total_with_age:<age>` with `age`). Takes the options of
#' [score()] (apart from `flags`, `keep` and `provenance`).
#'
#' @inheritParams score
#' @param label A column naming each episode (its value on the episode's
#'   row; long layout: the episode's first non-empty value), placed after
#'   the id and episode columns, with its type, as `explain --label`.
#' @return A data frame of the class of `data`: the id (and episode)
#'   column(s) when given, the `label` column when given, then `row` (the episode's row of `data`; in the
#'   long layout its first row), `index`, `source_row` and `source_date`
#'   (the row and date the code came from), `code_as_written`, `code`,
#'   `condition`, `weight` (integer, or double for weightings with
#'   decimals), `status` and `age_points` (the age points of a
#'   `total_with_age` row, missing elsewhere).
#' @examples
#' episodes <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
#' why <- explain(episodes[1:3, ], dx = "dx*", index = "charlson:charlson1987")
#' why[, c("row", "code", "condition", "weight", "status")]
#'
#' # name each episode by its episode_id
#' named <- explain(episodes[1:3, ], dx = "dx*", label = "episode_id",
#'                  index = "charlson:charlson1987")
#' named[named$status == "total", c("episode_id", "weight")]
#' @export
explain <- function(data, dx, index = NULL, age = NULL, id = NULL, date = NULL,
                    lookback = NULL, episode = NULL, layout = "wide",
                    hierarchy = TRUE, lists = NULL, strict = FALSE,
                    threads = 0L, dx_sep = NULL, date_format = NULL,
                    exclude_primary = FALSE, primary = NULL, poa = NULL,
                    poa_values = NULL, max_unreadable_dates = 1, quiet = TRUE,
                    window = NULL, label = NULL, edition = NULL) {
  opts <- options_list(
    dx, index, age, id, date, lookback, episode, layout, FALSE, hierarchy,
    strict, threads, dx_sep, date_format, exclude_primary, primary, poa,
    poa_values, max_unreadable_dates, window, edition, NULL, label
  )
  switch_value(quiet, "quiet")
  cols <- frame_columns(data)
  res <- call_native(
    "morbus_r_explain", cols, as.character(names(data)), opts, lists_dir(lists),
    call = sys.call()
  )
  if (!quiet) message(res$report)
  ex <- res$columns
  ex$source_date <- structure(ex$source_date, class = "Date")
  units <- c(opts$id, opts$episode)
  kept <- lapply(as.list(data)[units], function(x) x[ex$row])
  if (!is.null(opts$label)) {
    kept[[opts$label]] <- data[[opts$label]][res$label_rows]
  }
  frame_like(c(kept, ex), data)
}

#' The available code lists
#'
#' One row per list: name, version, title, number of conditions and code
#' entries, weightings (the default in `default_weighting`), whether it has
#' age points, content checksum, origin (built-in or file) and source. The
#' names and weightings are what `index` of [score()] takes.
#'
#' @param lists `NULL` (built-ins), a directory of list files or the result
#'   of [load_lists()].
#' @return A `data.frame`.
#' @examples
#' code_lists()[, c("name", "version", "weightings", "default_weighting")]
#' @export
code_lists <- function(lists = NULL) {
  res <- call_native("morbus_r_lists", lists_dir(lists), call = sys.call())
  frame_like(res$table, data.frame())
}

#' Load code lists from a directory
#'
#' Reads every list file (`*.tsv`) of a directory, on top of the built-in
#' lists (a list of the same name replaces the built-in one). Pass the
#' result as `lists` to [score()], [explain()] or [code_lists()]. A list
#' file can define a whole new index; `morbus lists export` writes an
#' editable copy of a built-in list.
#'
#' @param dir A directory.
#' @return An object of class `morbus_lists`: `path`, `names` (of every
#'   list now available) and `notes` (warnings of the files, and which
#'   built-ins were replaced).
#' @examples
#' dir <- file.path(tempdir(), "my-lists")
#' dir.create(dir, showWarnings = FALSE)
#' # a one-condition index of one's own, in the list file format
#' # (code-lists/FORMAT.md of the project)
#' writeLines(paste(c("list", "version", "title", "source", "default_weighting",
#'                    "condition", "code", "weighting", "weight"),
#'                  c("my_heart", "1.0", "Heart failure (example)", "Invented",
#'                    "count", "heart_failure\tHeart failure\tInvented",
#'                    "I50\theart_failure\tInvented", "count\tCount\tInvented",
#'                    "count\theart_failure\t1"), sep = "\t"),
#'            file.path(dir, "my_heart.tsv"))
#' mine <- load_lists(dir)
#' code_lists(mine)$name
#' score(data.frame(dx1 = c("I50.9", "J44")), dx = "dx1", index = "my_heart", lists = mine)
#' @export
load_lists <- function(dir) {
  dir <- one_text(dir, "dir")
  if (!dir.exists(dir)) usage_error(sprintf("%s is not a directory", dir), sys.call())
  path <- normalizePath(dir)
  res <- call_native("morbus_r_lists", path, call = sys.call())
  structure(
    list(path = path, names = res$table$name, notes = res$notes),
    class = "morbus_lists"
  )
}

#' @export
print.morbus_lists <- function(x, ...) {
  cat(sprintf("<morbus lists: %s; from the built-ins and %s>\n",
              paste(x$names, collapse = ", "), x$path))
  for (n in x$notes) cat("note: ", n, "\n", sep = "")
  invisible(x)
}

#' The provenance of a scored data frame
#'
#' What produced the scores of [score()] called with `provenance = TRUE`:
#' the morbus version, every list and weighting used with its version and
#' checksum, every option and the counts of the run (rows, codes, invalid
#' codes with the most frequent values, missing ages and dates), as the
#' command line's `--provenance` file holds them.
#'
#' @param x A data frame returned by [score()].
#' @return A list, or `NULL` when `x` carries no provenance.
#' @examples
#' episodes <- read.csv(system.file("extdata", "episodes.csv", package = "morbus"))
#' p <- provenance(score(episodes, dx = "dx*", provenance = TRUE))
#' p$rows
#' @export
provenance <- function(x) attr(x, "provenance", exact = TRUE)

#' Version of the morbus library the package was built with
#'
#' @return A character string.
#' @examples
#' morbus_version()
#' @export
morbus_version <- function() .Call("morbus_r_version")
