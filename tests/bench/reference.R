# Reference timing for the statistics benchmark: what a researcher would run on an export, with R.
#
# Invoked by tests/bench/stats.ts (one process per item and size, so sizes do not share memory):
#   Rscript tests/bench/reference.R --dir bench-results/data --item continuous --n 1000000 --reps 3
#
# Reads the first n values of bench-results/data/<item>-a.f64 and <item>-b.f64 (Float64 little-endian,
# invented data written by tests/bench/data.ts), so R sees exactly the numbers the service sees. For the
# integer 0-100 item these are the raw answers (the expanded data a researcher would hold), not counts.
#
# Timed with the data already in memory, per repetition:
#   t.test(a, b)                                   Welch t-test (var.equal = FALSE is R's default)
#   wilcox.test(a, b, exact = FALSE, correct = TRUE)  rank-sum, normal approximation with continuity correction
#   shapiro.test(a[1:5000]), shapiro.test(b[1:5000])  Shapiro-Wilk on a subsample of 5,000 (as the scipy script)
# Small sizes repeat each step `inner` times inside one timing (elapsed time has millisecond resolution).
# Prints one JSON object on stdout (needs jsonlite: apt-get install r-cran-jsonlite).
# Requires Debian's r-base-core (apt-get install r-base-core).

args <- commandArgs(trailingOnly = TRUE)
opt <- function(name, default = NULL) {
  i <- match(paste0("--", name), args)
  if (is.na(i)) {
    if (is.null(default)) stop("missing --", name)
    return(default)
  }
  args[[i + 1]]
}
dir <- opt("dir")
item <- opt("item")
n <- as.integer(opt("n"))
reps <- as.integer(opt("reps", "3"))
stopifnot(item %in% c("continuous", "integer"), n > 0, reps > 0)
SHAPIRO_SUBSAMPLE <- 5000L

peak_rss_kb <- function() {
  status <- readLines("/proc/self/status")
  line <- grep("^VmHWM:", status, value = TRUE)
  if (length(line) == 0) return(NA_integer_)
  as.integer(strsplit(trimws(sub("^VmHWM:", "", line)), "[[:space:]]+")[[1]][1])
}

load <- function(group) {
  path <- file.path(dir, paste0(item, "-", group, ".f64"))
  con <- file(path, "rb")
  on.exit(close(con))
  x <- readBin(con, what = "double", n = n, size = 8, endian = "little")
  if (length(x) != n) stop(path, " holds ", length(x), " values; ", n, " needed")
  x
}

a <- load("a")
b <- load("b")
inner <- max(1L, as.integer(ceiling(1e5 / n)))
m <- min(SHAPIRO_SUBSAMPLE, n)

now <- function() proc.time()[["elapsed"]]
run_once <- function(a, b, inner) {
  t0 <- now()
  for (i in seq_len(inner)) tt <- t.test(a, b)
  t1 <- now()
  for (i in seq_len(inner)) mw <- wilcox.test(a, b, exact = FALSE, correct = TRUE)
  t2 <- now()
  for (i in seq_len(inner)) {
    sa <- shapiro.test(a[seq_len(min(SHAPIRO_SUBSAMPLE, length(a)))])
    sb <- shapiro.test(b[seq_len(min(SHAPIRO_SUBSAMPLE, length(b)))])
  }
  t3 <- now()
  list(
    seconds = c(ttest = (t1 - t0) / inner, wilcox = (t2 - t1) / inner, shapiro = (t3 - t2) / inner, total = (t3 - t0) / inner),
    values = list(welchT = unname(tt$statistic), welchP = tt$p.value, u = unname(mw$statistic), mannWhitneyP = mw$p.value,
                  shapiroWA = unname(sa$statistic), shapiroWB = unname(sb$statistic))
  )
}

invisible(run_once(a[1:min(1000L, n)], b[1:min(1000L, n)], 1L)) # warm-up
rss_before <- peak_rss_kb()
seconds <- list(ttest = numeric(0), wilcox = numeric(0), shapiro = numeric(0), total = numeric(0))
values <- NULL
for (r in seq_len(reps)) {
  res <- run_once(a, b, inner)
  for (k in names(seconds)) seconds[[k]] <- c(seconds[[k]], res$seconds[[k]])
  values <- res$values
  message(sprintf("    R %s n=%d: rep %d/%d %.1f ms", item, n, r, reps, res$seconds[["total"]] * 1000))
}

out <- list(
  tool = "R",
  versions = list(R = paste(R.version$major, R.version$minor, sep = "."), jsonlite = as.character(packageVersion("jsonlite"))),
  item = item,
  n = n,
  reps = reps,
  inner = inner,
  seconds = lapply(seconds, I),
  values = values,
  peakRssKbBeforeTiming = rss_before,
  peakRssKb = peak_rss_kb()
)
cat(jsonlite::toJSON(out, auto_unbox = TRUE, digits = NA), "\n")
