# Reference values of the Shapiro–Wilk test from R's shapiro.test, run as a black box (R documents it as
# Royston 1995, AS R94), for stats/shapiro-wilk.ts.
#
# Writes tests/fixtures/r-shapiro.json. Regenerate with:
#     Rscript tests/reference/make-shapiro-fixtures.R
# (run from the repository root; R from Debian's r-base-core; no package beyond base R is needed).
#
# Every data set is invented here with set.seed and written into the JSON with the values R saw, so
# the tests need no R. Numbers are written with the shortest of %.15g / %.16g / %.17g that reads back
# to the identical double (jsonlite's toJSON stops at 15 significant digits, so it is not used for
# numbers). Cases where shapiro.test stops with an error (n < 3, constant data) record R's message
# under "error" instead of w and p.
#
# Output:
# { "note", "tools": { "R" }, "generated",
#   "datasets": [ { "name", "description", "n", "ties", "x": [...], "w", "p", "wCentred", "pCentred" }
#                 | { ..., "error" } ] }
# where wCentred, pCentred = shapiro.test(x - median(x)) (see add() below).

out_file <- file.path("tests", "fixtures", "r-shapiro.json")
if (!dir.exists(dirname(out_file))) stop("run from the repository root (tests/fixtures not found)")

num <- function(x) {
  if (length(x) == 0) return(character(0))
  vapply(x, function(v) {
    if (is.na(v) || !is.finite(v)) return("null")
    for (d in 15:17) {
      s <- sprintf(paste0("%.", d, "g"), v)
      if (as.numeric(s) == v) return(s)
    }
    s
  }, character(1))
}
str_json <- function(s) {
  s <- gsub("\\\\", "\\\\\\\\", s)
  s <- gsub("\"", "\\\\\"", s)
  s <- gsub("\n", "\\\\n", s)
  paste0("\"", s, "\"")
}

datasets <- list()
add <- function(name, description, x) {
  res <- tryCatch(shapiro.test(x), error = function(e) e)
  entry <- list(name = name, description = description, n = length(x),
                ties = any(duplicated(x)), x = x)
  if (inherits(res, "error")) {
    entry$error <- conditionMessage(res)
  } else {
    entry$w <- unname(res$statistic)
    entry$p <- res$p.value
    # W is location invariant, but shapiro.test's W moves when the data are shifted, so far from 0
    # (e.g. 1e6 + values with a spread of 1) it loses digits. The same test on the
    # data shifted by their median is recorded beside it.
    centred <- shapiro.test(x - median(x))
    entry$wCentred <- unname(centred$statistic)
    entry$pCentred <- centred$p.value
  }
  datasets[[length(datasets) + 1L]] <<- entry
}

# Sizes named in the brief: both branches of the p approximation (n = 3 exact, 4..11, >= 12) and
# both coefficient branches (n <= 5 and n > 5).
sizes <- c(3, 4, 5, 6, 7, 11, 12, 20, 50, 100, 1000, 5000)
for (n in sizes) {
  set.seed(1000 + n)
  add(sprintf("normal-n%d", n), sprintf("round(rnorm(%d, 10, 2), 8), set.seed(%d): untied normal data", n, 1000 + n),
      round(rnorm(n, 10, 2), 8))
  set.seed(2000 + n)
  add(sprintf("likert-n%d", n), sprintf("sample(1:7, %d, replace = TRUE, prob = c(1, 2, 4, 6, 4, 2, 1)), set.seed(%d): a 1-7 item, heavy ties", n, 2000 + n),
      sample(1:7, n, replace = TRUE, prob = c(1, 2, 4, 6, 4, 2, 1)))
}
for (n in c(4, 7, 11, 12, 20, 50, 100, 1000, 5000)) {
  set.seed(3000 + n)
  add(sprintf("exponential-n%d", n), sprintf("round(rexp(%d), 8), set.seed(%d): skewed, small p for large n", n, 3000 + n),
      round(rexp(n), 8))
}
set.seed(4001)
add("lognormal-n5000", "round(rlnorm(5000, 0, 1.5), 8), set.seed(4001): very skewed, p far below 1e-50",
    round(rlnorm(5000, 0, 1.5), 8))
set.seed(4002)
add("bimodal-n300", "two well separated normal clusters, set.seed(4002)",
    round(c(rnorm(150, -4), rnorm(150, 4)), 8))
set.seed(4003)
add("rounded-normal-n200", "round(rnorm(200, 50, 10)): integers, many ties, set.seed(4003)",
    round(rnorm(200, 50, 10)))
set.seed(4004)
add("integers-0-10-n5000", "sample(0:10, 5000, replace = TRUE): a uniform 0-10 item, extreme ties, set.seed(4004)",
    sample(0:10, 5000, replace = TRUE))
add("n3-equally-spaced", "c(1, 2, 3): W = 1, p just below 1 (R's truncated sqrt(1/2) coefficient)", c(1, 2, 3))
add("n3-tie-low", "c(0, 0, 1): W = 3/4, the exact n = 3 p-value clamped at 0", c(0, 0, 1))
add("n3-unequal", "c(2.5, 3.1, 7.9)", c(2.5, 3.1, 7.9))
add("n4-tie-pair", "c(1, 1, 2, 2)", c(1, 1, 2, 2))
add("n5-one-outlier", "c(1, 2, 3, 4, 100)", c(1, 2, 3, 4, 100))
add("n11-mixed-signs", "eleven invented values of both signs with one tie", c(-2.1, -1.3, -0.8, -0.8, -0.35, 0.05, 0.4, 0.9, 1.2, 1.25, 3.6))
set.seed(4005)
add("tiny-range-n20", "rnorm(20) * 1e-12: range below 1e-10, so shapiro.test first divides by the range, set.seed(4005)",
    rnorm(20) * 1e-12)
set.seed(4006)
add("large-offset-n30", "1e6 + round(rnorm(30), 6): values far from 0 relative to their spread, set.seed(4006)",
    1e6 + round(rnorm(30), 6))
set.seed(4007)
add("negative-n25", "-round(rexp(25) * 1000, 3): all negative, left-skewed, set.seed(4007)",
    -round(rexp(25) * 1000, 3))
add("error-n2", "two values: shapiro.test stops (sample size must be between 3 and 5000)", c(1, 2))
add("error-constant", "constant data: shapiro.test stops (all 'x' values are identical)", rep(4, 10))

entry_json <- function(e) {
  fields <- c(
    paste0("\"name\": ", str_json(e$name)),
    paste0("\"description\": ", str_json(e$description)),
    paste0("\"n\": ", e$n),
    paste0("\"ties\": ", if (e$ties) "true" else "false"),
    paste0("\"x\": [", paste(num(e$x), collapse = ", "), "]")
  )
  if (!is.null(e$error)) {
    fields <- c(fields, paste0("\"error\": ", str_json(e$error)))
  } else {
    fields <- c(fields, paste0("\"w\": ", num(e$w)), paste0("\"p\": ", num(e$p)),
                paste0("\"wCentred\": ", num(e$wCentred)), paste0("\"pCentred\": ", num(e$pCentred)))
  }
  paste0("    {\n      ", paste(fields, collapse = ",\n      "), "\n    }")
}

header <- c(
  paste0("  \"note\": ", str_json("generated by tests/reference/make-shapiro-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-shapiro-fixtures.R")),
  paste0("  \"tools\": { \"R\": ", str_json(R.version.string), " }"),
  paste0("  \"generated\": ", str_json(format(Sys.Date(), "%Y-%m-%d")))
)
text <- paste0("{\n", paste(header, collapse = ",\n"), ",\n  \"datasets\": [\n",
               paste(vapply(datasets, entry_json, character(1)), collapse = ",\n"), "\n  ]\n}\n")
con <- file(out_file, open = "w", encoding = "UTF-8")
writeLines(text, con, sep = "")
close(con)
cat(sprintf("wrote %s: %d datasets\n", out_file, length(datasets)))
