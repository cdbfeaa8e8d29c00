#!/usr/bin/env Rscript
# make-fixtures.R — writes tests/fixtures/r-reference.json, the R reference values for stats/.
#
# Run from the project root:   Rscript tests/reference/make-fixtures.R
# Needs R (Debian r-base-core) with coin (r-cran-coin) and jsonlite (r-cran-jsonlite).
# The output format is described in tests/fixtures/README.md. Never edit the JSON by hand.
#
# What it records, per data set (all but two invented here with set.seed; the two published ones are
# Student's sleep data and the Hollander & Wolfe example of R's ?wilcox.test):
#   summaries   n, mean, sd, quantile(type = 7), min, max, mad (constant 1.4826), shapiro.test
#   hodgesLehmann  median of all pairwise differences a_i - b_j
#   cases       for every alternative ("two-sided", "less", "greater") x confidence level (0.90, 0.95, 0.99):
#               t.test Welch and pooled; wilcox.test exact (only where R really computes exactly: no ties,
#               n_a < 50 and n_b < 50) and normal (correct = TRUE and FALSE); the normal-quantile
#               Hodges-Lehmann interval, computed here by formula; coin::wilcox_test(distribution = "exact").
# and, at top level, p.adjust (holm, BH) on a few p-value vectors and kruskal.test on two groups.
#
# Conventions: differences are a - b. A block that R refuses (error) or that is not computed is null,
# and the object holding it gets a "reasons" map with a sentence for it. Infinite or NaN values are null.
#
# Number formatting: jsonlite's digits = NA prints only 15 significant digits, which does NOT round-trip
# (most random doubles change in the last bits, and .Machine$double.xmax would print as a number above
# the largest double). So every number is written here in the shortest of %.15g / %.16g / %.17g that
# reads back as the identical double, and inserted into the JSON verbatim.

suppressPackageStartupMessages({
  library(coin)
  library(jsonlite)
})

OUT <- "tests/fixtures/r-reference.json"
if (!dir.exists("tests/fixtures")) stop("run from the project root: Rscript tests/reference/make-fixtures.R")

ALTERNATIVES <- c("two-sided", "less", "greater")
R_ALTERNATIVE <- c("two-sided" = "two.sided", "less" = "less", "greater" = "greater")
LEVELS <- c(0.90, 0.95, 0.99)
MAX_PAIRS_FOR_NORMAL_CI <- 4e6        # hodgesLehmannNormalCi is null above this many pairwise differences
MAX_PAIRS_MATERIALISED <- 4e6         # above this, order statistics of the differences are found in chunks
COIN_MAX_TOTAL_WITH_TIES <- 200       # coin exact (with its CI) is quick on tied data up to here
COIN_MAX_TOTAL_NO_TIES <- 40          # on tie-free data coin's exact CI is slow (seconds per level at 100 + 100)

# ---------------------------------------------------------------------------------------------------------
# helpers

num1 <- function(x) {                 # one finite number or NA (written as null)
  if (is.null(x) || length(x) == 0) return(NA_real_)
  x <- unname(as.numeric(x))[1]
  if (is.finite(x)) x else NA_real_
}

# Evaluate expr; return list(value, error, warnings). Errors are caught, warnings collected.
attempt <- function(expr) {
  warnings <- character(0)
  value <- withCallingHandlers(
    tryCatch(expr, error = function(e) structure(list(message = conditionMessage(e)), class = "attemptError")),
    warning = function(w) {
      warnings <<- c(warnings, conditionMessage(w))
      invokeRestart("muffleWarning")
    }
  )
  if (inherits(value, "attemptError")) list(value = NULL, error = value$message, warnings = warnings)
  else list(value = value, error = NULL, warnings = warnings)
}

has_ties <- function(a, b) anyDuplicated(c(a, b)) > 0

# k-th smallest of the pairwise differences a_i - b_j, for a vector of ks.
# Small: sort(outer()). Large: an approximate window from a random sample of pairs, then an exact pass
# over chunks of rows that counts the differences below the window and keeps those inside it.
pairwise_order_stats <- function(a, b, ks, sorted_differences = NULL) {
  n_pairs <- length(a) * length(b)
  if (!is.null(sorted_differences)) return(sorted_differences[ks])
  if (n_pairs <= MAX_PAIRS_MATERIALISED) return(sort(outer(a, b, "-"))[ks])
  rng_state <- .Random.seed                     # do not disturb the data generators' RNG stream
  on.exit(assign(".Random.seed", rng_state, envir = .GlobalEnv))
  set.seed(12345)
  sample_differences <- sort(a[sample.int(length(a), 2e5, TRUE)] - b[sample.int(length(b), 2e5, TRUE)])
  vapply(ks, function(k) {
    target <- k / n_pairs
    width <- 0.005
    repeat {
      lo <- if (target - width <= 0) -Inf else quantile(sample_differences, target - width, type = 1, names = FALSE)
      hi <- if (target + width >= 1) Inf else quantile(sample_differences, target + width, type = 1, names = FALSE)
      below <- 0
      window <- numeric(0)
      rows_per_chunk <- max(1L, floor(2e6 / length(b)))
      for (start in seq(1L, length(a), by = rows_per_chunk)) {
        rows <- start:min(length(a), start + rows_per_chunk - 1L)
        d <- outer(a[rows], b, "-")
        below <- below + sum(d < lo)
        window <- c(window, d[d >= lo & d <= hi])
      }
      if (below < k && k <= below + length(window)) return(sort(window)[k - below])
      width <- width * 4
    }
  }, numeric(1))
}

# median of pairwise differences, exactly as median(outer(a, b, "-")) computes it
pairwise_median <- function(a, b, sorted_differences = NULL) {
  n_pairs <- length(a) * length(b)
  half <- (n_pairs + 1) %/% 2
  if (n_pairs %% 2 == 1) pairwise_order_stats(a, b, half, sorted_differences)
  else mean(pairwise_order_stats(a, b, c(half, half + 1), sorted_differences))
}

summarise_group <- function(x) {
  n <- length(x)
  q <- quantile(x, c(0.25, 0.5, 0.75), type = 7, names = FALSE)
  out <- list(
    n = n,
    mean = if (n >= 1) num1(mean(x)) else NA_real_,
    sd = if (n >= 2) num1(sd(x)) else NA_real_,
    median = num1(median(x)), q1 = num1(q[1]), q3 = num1(q[3]),
    min = num1(min(x)), max = num1(max(x)),
    mad = num1(mad(x)),
    shapiro = NULL
  )
  reasons <- list()
  if (n < 3 || n > 5000) {
    reasons$shapiro <- "shapiro.test needs 3 <= n <= 5000"
  } else if (max(x) == min(x)) {
    reasons$shapiro <- "group is constant: Shapiro-Wilk W is undefined (shapiro.test: all 'x' values are identical)"
  } else {
    sw <- attempt(shapiro.test(x))
    if (is.null(sw$error)) out$shapiro <- list(w = num1(sw$value$statistic), p = num1(sw$value$p.value))
    else reasons$shapiro <- paste("R refuses: shapiro.test:", sw$error)
  }
  if (length(reasons)) out$reasons <- reasons
  out
}

t_block <- function(a, b, alternative, level, var_equal) {
  r <- attempt(t.test(a, b, alternative = R_ALTERNATIVE[[alternative]], conf.level = level, var.equal = var_equal))
  if (!is.null(r$error)) return(list(value = NULL, reason = paste("R refuses: t.test:", r$error)))
  v <- r$value
  list(value = list(
    t = num1(v$statistic), df = num1(v$parameter), p = num1(v$p.value),
    meanDifference = num1(v$estimate[1] - v$estimate[2]), se = num1(v$stderr),
    ciLower = num1(v$conf.int[1]), ciUpper = num1(v$conf.int[2])
  ), reason = NULL)
}

# The true coverage of R's exact interval, by the same formula wilcox.test uses for achieved.alpha.
exact_coverage <- function(n_a, n_b, alternative, level) {
  alpha <- 1 - level
  if (alternative == "two-sided") {
    qu <- qwilcox(alpha / 2, n_a, n_b); if (qu == 0) qu <- 1
    1 - 2 * pwilcox(trunc(qu) - 1, n_a, n_b)
  } else {
    qu <- qwilcox(alpha, n_a, n_b); if (qu == 0) qu <- 1
    1 - pwilcox(trunc(qu) - 1, n_a, n_b)
  }
}

# Normal-quantile Hodges-Lehmann interval (tests/fixtures/README.md):
#   n_pairs = n_a * n_b (number of pairwise differences), n_total = n_a + n_b,
#   V = n_a n_b / 12 * ((n_total + 1) - sum(t^3 - t) / (n_total (n_total - 1)))   (tie-corrected variance of U)
#   k = floor(n_pairs / 2 - z sqrt(V)); lower = D[k], upper = D[n_pairs + 1 - k]
#   two-sided z = qnorm(1 - alpha / 2); one-sided z = qnorm(1 - alpha), "greater" keeps only the lower bound,
#   "less" only the upper. Null when k < 1.
hl_normal_ci <- function(a, b, alternative, level, sorted_differences) {
  n_a <- length(a); n_b <- length(b)
  n_pairs <- n_a * n_b
  n_total <- n_a + n_b
  if (n_pairs > MAX_PAIRS_FOR_NORMAL_CI) return(list(value = NULL, reason = "not computed: n_a * n_b > 4e6"))
  tie_sizes <- as.numeric(table(c(a, b)))
  variance_u <- n_a * n_b / 12 * ((n_total + 1) - sum(tie_sizes^3 - tie_sizes) / (n_total * (n_total - 1)))
  alpha <- 1 - level
  z <- if (alternative == "two-sided") qnorm(1 - alpha / 2) else qnorm(1 - alpha)
  k <- floor(n_pairs / 2 - z * sqrt(variance_u))
  if (k < 1) return(list(value = NULL, reason = sprintf("k = %d < 1: too few observations for this level", k)))
  lower <- if (alternative == "less") NA_real_ else sorted_differences[k]
  upper <- if (alternative == "greater") NA_real_ else sorted_differences[n_pairs + 1 - k]
  list(value = list(ciLower = num1(lower), ciUpper = num1(upper)), reason = NULL)
}

# ---------------------------------------------------------------------------------------------------------
# data sets

DATASETS <- list()
add <- function(name, description, seed, generate, expect_ties = NA) {
  if (!is.na(seed)) set.seed(seed)
  ab <- generate()
  a <- as.numeric(ab$a); b <- as.numeric(ab$b)
  stopifnot(all(is.finite(a)), all(is.finite(b)), !(name %in% names(DATASETS)))
  if (!is.na(expect_ties) && has_ties(a, b) != expect_ties)
    stop(sprintf("data set %s: expected ties = %s", name, expect_ties))
  DATASETS[[name]] <<- list(name = name, description = description, a = a, b = b)
}
invented <- function(seed, text) sprintf("%s All data invented, generated with set.seed(%d).", text, seed)
scale_item <- function(n, values, probabilities) sample(values, n, replace = TRUE, prob = probabilities)

add("student-sleep",
    paste("Student's sleep data (Cushny & Peebles 1905, analysed by Student 1908), shipped with R as `sleep`:",
          "a = extra hours of sleep under drug 1 (group 1), b = under drug 2 (group 2), as extra ~ group.",
          "Published data, not invented. Reference: Welch t = -1.8608, df = 17.776, p = 0.07939. Has ties."),
    NA, function() list(a = sleep$extra[sleep$group == "1"], b = sleep$extra[sleep$group == "2"]), TRUE)

add("hollander-wolfe-wilcox-help",
    paste("Hollander & Wolfe (1973, p. 69) two-sample example from R's ?wilcox.test: permeability constants,",
          "a = x (at term, 10 values), b = y (12-26 weeks, 5 values). Published data, not invented. No ties;",
          "R: W = 35, exact two-sided p = 0.2544 (greater: 0.1272)."),
    NA, function() list(a = c(0.80, 0.83, 1.89, 1.04, 1.45, 1.38, 1.91, 1.64, 0.73, 1.46),
                        b = c(1.15, 0.88, 0.90, 0.74, 1.21)), FALSE)

add("n3-vs-3-continuous", invented(301, "Smallest groups, continuous normal values (b shifted up by 1), no ties; exact CIs cannot reach the requested level."),
    301, function() list(a = rnorm(3, 0, 1), b = rnorm(3, 1, 1)), FALSE)

add("n3-vs-3-ties", invented(302, "Smallest groups on a 1-3 scale with ties within and across groups."),
    302, function() list(a = sample(1:3, 3, TRUE), b = sample(1:3, 3, TRUE)), TRUE)

add("n3-vs-4-ties", invented(303, "3 vs 4 values on a 1-5 scale, ties across groups."),
    303, function() list(a = sample(1:5, 3, TRUE), b = sample(2:5, 4, TRUE)), TRUE)

add("n4-vs-5-continuous", invented(304, "4 vs 5 continuous normal values (means 10 and 8, sd 2), no ties."),
    304, function() list(a = rnorm(4, 10, 2), b = rnorm(5, 8, 2)), FALSE)

add("n5-vs-5-separated", invented(305, "Complete separation: every a above every b (W = 25; exact two-sided p = 2/252). Checks the direction a - b, also of coin."),
    305, function() list(a = rnorm(5, 10, 1), b = rnorm(5, 0, 1)), FALSE)

add("n5-vs-7-integer-ties", invented(306, "5 vs 7 answers on a 1-5 scale: heavy ties at tiny n."),
    306, function() list(a = sample(1:5, 5, TRUE), b = sample(1:5, 7, TRUE)), TRUE)

add("n7-vs-10-continuous-shift", invented(307, "7 vs 10 normal values, a shifted up by 1 sd, no ties."),
    307, function() list(a = rnorm(7, 1, 1), b = rnorm(10, 0, 1)), FALSE)

add("n10-vs-10-null", invented(310, "10 vs 10 normal values from the same distribution, no ties."),
    310, function() list(a = rnorm(10), b = rnorm(10)), FALSE)

add("n20-vs-20-moderate-shift", invented(320, "20 vs 20 normal values, a shifted up by 0.8 sd, no ties."),
    320, function() list(a = rnorm(20, 0.8), b = rnorm(20)), FALSE)

add("n49-vs-49-exact-boundary", invented(349, "49 vs 49 normal values, shift 0.3 sd, no ties: the largest size at which R's exact Wilcoxon is its default."),
    349, function() list(a = rnorm(49, 0.3), b = rnorm(49)), FALSE)

add("n50-vs-50-normal-boundary", invented(350, "50 vs 50 normal values, shift 0.3 sd, no ties: R switches to the normal approximation (wilcoxExact null)."),
    350, function() list(a = rnorm(50, 0.3), b = rnorm(50)), FALSE)

add("n49-vs-50-mixed-boundary", invented(351, "49 vs 50 normal values, b shifted by -0.2 sd, no ties: one group below and one at R's exact limit (wilcoxExact null)."),
    351, function() list(a = rnorm(49), b = rnorm(50, -0.2)), FALSE)

add("n100-vs-100-lognormal", invented(400, "Skewed: 100 vs 100 lognormal values (meanlog 0 vs 0.3, sdlog 1), no ties."),
    400, function() list(a = rlnorm(100, 0, 1), b = rlnorm(100, 0.3, 1)), FALSE)

add("n500-vs-500-exponential", invented(401, "Skewed: 500 vs 500 exponential values (means 1 and 1.2), no ties."),
    401, function() list(a = rexp(500, 1), b = rexp(500, 1 / 1.2)), FALSE)

add("n20-vs-80-exponential", invented(402, "Skewed and unequal sizes: 20 vs 80 exponential values (means 2 and 1), no ties."),
    402, function() list(a = rexp(20, 1 / 2), b = rexp(80, 1)), FALSE)

add("n10-vs-200-unequal-sizes", invented(410, "Very unequal sizes: 10 vs 200 normal values, a shifted by 0.5 sd, no ties."),
    410, function() list(a = rnorm(10, 0.5), b = rnorm(200)), FALSE)

add("n40-vs-40-sd-ratio-5", invented(411, "Unequal spreads: 40 vs 40 normal values, sd 5 vs 1 (ratio 5), means 0 vs 0.5, no ties."),
    411, function() list(a = rnorm(40, 0, 5), b = rnorm(40, 0.5, 1)), FALSE)

add("n15-vs-150-sd-ratio-8", invented(412, "Behrens-Fisher worst case: the small group (15) has sd 8, the large group (150) sd 1; means 1 vs 0; no ties. Welch and pooled disagree."),
    412, function() list(a = rnorm(15, 1, 8), b = rnorm(150, 0, 1)), FALSE)

add("n20-vs-5000-lognormal", invented(413, "Extremely unequal sizes: 20 vs 5000 lognormal values (meanlog 0.2 vs 0), no ties; 100,000 pairwise differences."),
    413, function() list(a = rlnorm(20, 0.2, 1), b = rlnorm(5000, 0, 1)), FALSE)

add("n500-vs-100-uniform", invented(414, "500 vs 100 uniform(0, 1) values, no shift, no ties."),
    414, function() list(a = runif(500), b = runif(100)), FALSE)

add("n33-vs-27-heavy-tails", invented(415, "Heavy tails: 33 vs 27 values from Student's t with 3 df, b shifted by +0.5, negative and positive values, no ties."),
    415, function() list(a = rt(33, 3), b = rt(27, 3) + 0.5), FALSE)

add("n80-vs-80-bimodal-vs-unimodal", invented(416, "Different shapes, same centre: a bimodal (normal mixture at -2 and +2, sd 0.7), b normal with sd 2.1; no ties."),
    416, function() list(a = c(rnorm(40, -2, 0.7), rnorm(40, 2, 0.7)), b = rnorm(80, 0, 2.1)), FALSE)

add("likert7-n12-vs-15", invented(500, "1-7 agreement scale, 12 vs 15 answers: heavy ties at small n."),
    500, function() list(a = scale_item(12, 1:7, c(1, 2, 3, 4, 4, 3, 2)), b = scale_item(15, 1:7, c(2, 3, 4, 4, 3, 2, 1))), TRUE)

add("likert7-n1000-vs-1200", invented(501, "1-7 agreement scale, 1000 vs 1200 answers: heavy ties at large n, small shift."),
    501, function() list(a = scale_item(1000, 1:7, c(1, 2, 3, 4, 5, 4, 2)), b = scale_item(1200, 1:7, c(1, 2, 4, 5, 4, 3, 2))), TRUE)

add("likert7-ceiling-n150-vs-180", invented(502, "1-7 scale with a ceiling effect (most answers 6 or 7), 150 vs 180 answers."),
    502, function() list(a = scale_item(150, 1:7, c(0.5, 0.5, 1, 2, 5, 15, 30)), b = scale_item(180, 1:7, c(0.5, 1, 1, 3, 6, 15, 25))), TRUE)

add("scale10-n20-vs-25", invented(510, "0-10 rating scale, 20 vs 25 answers."),
    510, function() list(a = scale_item(20, 0:10, c(1, 1, 1, 2, 3, 5, 6, 7, 6, 4, 2)), b = scale_item(25, 0:10, c(1, 1, 2, 3, 5, 6, 6, 5, 4, 2, 1))), TRUE)

add("scale10-n5000-vs-5000", invented(511, "0-10 rating scale, 5000 vs 5000 answers (25 million pairwise differences: no normal HL interval)."),
    511, function() list(a = scale_item(5000, 0:10, c(2, 1, 2, 3, 5, 8, 9, 10, 9, 6, 4)), b = scale_item(5000, 0:10, c(2, 2, 3, 4, 6, 8, 9, 9, 8, 5, 3))), TRUE)

add("scale100-n30-vs-30", invented(520, "0-100 scale, 30 vs 30 answers (integer, some ties)."),
    520, function() list(a = pmin(100, pmax(0, round(rnorm(30, 62, 18)))), b = pmin(100, pmax(0, round(rnorm(30, 55, 18))))), TRUE)

add("scale100-n100-vs-100", invented(521, "0-100 scale, 100 vs 100 answers with clumping at multiples of 10 and at the bounds."),
    521, function() {
      g <- function(n, m) { x <- round(rnorm(n, m, 25)); r <- runif(n) < 0.4; x[r] <- round(x[r], -1); pmin(100, pmax(0, x)) }
      list(a = g(100, 60), b = g(100, 52))
    }, TRUE)

add("scale100-n2000-vs-2500", invented(522, "0-100 scale, 2000 vs 2500 answers (5 million pairwise differences: no normal HL interval)."),
    522, function() list(a = pmin(100, pmax(0, round(rnorm(2000, 58, 20)))), b = pmin(100, pmax(0, round(rnorm(2500, 56, 20))))), TRUE)

add("scale100-extreme-answers-n60-vs-60", invented(523, paste(
      "0-100 scale, 60 vs 60 answers; a has 4 extreme but valid answers of 0 among values near 70.",
      "The extremes move a's mean and the Welch p a long way; its median and the rank-sum p barely move.")),
    523, function() list(a = c(pmin(100, round(rnorm(56, 72, 8))), 0, 0, 0, 0), b = pmin(100, round(rnorm(60, 64, 8)))), TRUE)

add("continuous-extreme-answers-n30-vs-30", invented(524, "Continuous values near 50 (sd 5), 30 vs 30; a has 3 extreme but valid values near 150."),
    524, function() list(a = c(rnorm(27, 53, 5), rnorm(3, 150, 5)), b = rnorm(30, 50, 5)), FALSE)

add("half-point-ties-n25-vs-30", invented(525, "Values rounded to halves (a 0-10 scale with half points), 25 vs 30: ties at non-integers."),
    525, function() list(a = round(rnorm(25, 6, 1.5) * 2) / 2, b = round(rnorm(30, 5.2, 1.5) * 2) / 2), TRUE)

add("one-group-constant", invented(530, "a is constant (all 5, n = 10), b varies on a 1-7 scale (n = 12)."),
    530, function() list(a = rep(5, 10), b = scale_item(12, 1:7, rep(1, 7))), TRUE)

add("both-constant-different", invented(531, "Both groups constant with different values (a all 3, n = 8; b all 5, n = 6): t.test refuses (data are essentially constant)."),
    531, function() list(a = rep(3, 8), b = rep(5, 6)), TRUE)

add("all-values-equal", invented(532, paste("Every value equal across both groups (all 4; n = 5 and 7): t.test refuses; the rank-sum z is 0/0, so R's",
      "two-sided normal p is NaN (null), while its one-sided continuity-corrected p is 1 only because -0.5/0 = -Inf;",
      "coin refuses the p-value and the interval.")),
    532, function() list(a = rep(4, 5), b = rep(4, 7)), TRUE)

add("large-shift-n2000", invented(540, "2000 vs 2000 normal values, a shifted up by 1.05 sd: t-test p near 1e-205, rank-sum p near 1e-185 (not flushed to 0)."),
    540, function() list(a = rnorm(2000, 1.05), b = rnorm(2000)), FALSE)

add("large-shift-n500", invented(541, "500 vs 500 normal values, a shifted up by 3 sd: one-sided t-test p near 1e-262 (towards the bottom of the double range), rank-sum p near 1e-155."),
    541, function() list(a = rnorm(500, 3.0), b = rnorm(500)), FALSE)

add("n5000-vs-5000-small-shift", invented(542, "5000 vs 5000 normal values, shift 0.05 sd, no ties: Shapiro-Wilk at its upper size limit, 25 million pairwise differences."),
    542, function() list(a = rnorm(5000, 0.05), b = rnorm(5000)), FALSE)

add("magnitude-1e12", invented(550, paste(
      "Values of magnitude 1e12 with a spread of about 10 (1e12 + normal(0, 10) vs 1e12 + normal(4, 10)), 30 vs 25:",
      "cancellation in means and variances. Caution: R's shapiro.test divides by the range without centring,",
      "so its W carries a relative error of order 1e-6 here (see the shapiroCentred note in the summaries).")),
    550, function() list(a = 1e12 + rnorm(30, 0, 10), b = 1e12 + rnorm(25, 4, 10)), FALSE)

add("near-zero-1e-9", invented(551, "Values near zero: normal(3e-9, 1e-9) vs normal(2e-9, 1e-9), 25 vs 25, no ties."),
    551, function() list(a = rnorm(25, 3e-9, 1e-9), b = rnorm(25, 2e-9, 1e-9)), FALSE)

# ---------------------------------------------------------------------------------------------------------
# compute

build_dataset <- function(d) {
  a <- d$a; b <- d$b
  n_a <- length(a); n_b <- length(b); n_total <- n_a + n_b; n_pairs <- n_a * n_b
  ties <- has_ties(a, b)
  sorted_differences <- if (n_pairs <= MAX_PAIRS_MATERIALISED) sort(outer(a, b, "-")) else NULL
  hodges_lehmann <- pairwise_median(a, b, sorted_differences)
  if (!is.null(sorted_differences)) stopifnot(identical(hodges_lehmann, median(outer(a, b, "-"))))

  coin_eligible <- if (ties) n_total <= COIN_MAX_TOTAL_WITH_TIES else n_total <= COIN_MAX_TOTAL_NO_TIES
  coin_reason <- if (coin_eligible) NULL else if (ties)
    sprintf("not run: ties, but total n = %d > %d (slow)", n_total, COIN_MAX_TOTAL_WITH_TIES) else
    sprintf("not run: no ties and total n = %d > %d (coin's exact CI is slow on tie-free data)", n_total, COIN_MAX_TOTAL_NO_TIES)
  exact_eligible <- !ties && n_a < 50 && n_b < 50
  coin_data <- data.frame(y = c(a, b), g = factor(rep(c("a", "b"), c(n_a, n_b)), levels = c("a", "b")))

  cases <- list()
  for (alternative in ALTERNATIVES) {
    coin_test <- if (coin_eligible) attempt(wilcox_test(y ~ g, data = coin_data, distribution = "exact",
                                                        conf.int = TRUE, conf.level = 0.95,
                                                        alternative = R_ALTERNATIVE[[alternative]])) else NULL
    for (level in LEVELS) {
      reasons <- list()
      warnings <- list()
      case <- list(alternative = alternative, confidenceLevel = level)

      w <- t_block(a, b, alternative, level, FALSE)
      case$welch <- w$value; if (!is.null(w$reason)) reasons$welch <- w$reason
      s <- t_block(a, b, alternative, level, TRUE)
      case$student <- s$value; if (!is.null(s$reason)) reasons$student <- s$reason

      case$wilcoxExact <- NULL
      if (exact_eligible) {
        r <- attempt(wilcox.test(a, b, alternative = R_ALTERNATIVE[[alternative]], exact = TRUE,
                                 conf.int = TRUE, conf.level = level))
        stopifnot(is.null(r$error), grepl("exact", r$value$method))
        v <- r$value
        case$wilcoxExact <- list(
          W = num1(v$statistic), p = num1(v$p.value), estimate = num1(v$estimate),
          ciLower = num1(v$conf.int[1]), ciUpper = num1(v$conf.int[2]),
          achievedLevel = num1(attr(v$conf.int, "conf.level")),
          exactCoverage = num1(exact_coverage(n_a, n_b, alternative, level)))
        if (length(r$warnings)) warnings$wilcoxExact <- paste(unique(r$warnings), collapse = "; ")
      } else {
        reasons$wilcoxExact <- if (ties) "R does not compute exactly with ties (normal approximation)" else
          "R's exact Wilcoxon is used only when n_a < 50 and n_b < 50"
      }

      r <- attempt(wilcox.test(a, b, alternative = R_ALTERNATIVE[[alternative]], exact = FALSE, correct = TRUE))
      stopifnot(is.null(r$error))
      case$wilcoxNormal <- list(W = num1(r$value$statistic), p = num1(r$value$p.value))
      if (is.na(case$wilcoxNormal$p)) reasons$wilcoxNormal <- "R returns NaN for p: the tie-corrected variance of U is 0 (all values equal)"
      r <- attempt(wilcox.test(a, b, alternative = R_ALTERNATIVE[[alternative]], exact = FALSE, correct = FALSE))
      stopifnot(is.null(r$error))
      case$wilcoxNormalUncorrected <- list(p = num1(r$value$p.value))
      if (is.na(case$wilcoxNormalUncorrected$p)) reasons$wilcoxNormalUncorrected <- "R returns NaN for p: the tie-corrected variance of U is 0 (all values equal)"

      h <- hl_normal_ci(a, b, alternative, level, sorted_differences)
      case$hodgesLehmannNormalCi <- h$value; if (!is.null(h$reason)) reasons$hodgesLehmannNormalCi <- h$reason

      case$coinExact <- NULL
      if (!coin_eligible) {
        reasons$coinExact <- coin_reason
      } else if (!is.null(coin_test$error)) {
        reasons$coinExact <- paste("R refuses: coin::wilcox_test:", coin_test$error)
      } else {
        p <- attempt(pvalue(coin_test$value))
        ci <- attempt(confint(coin_test$value, level = level))
        block <- list(p = if (is.null(p$error)) num1(p$value) else NA_real_,
                      estimate = NA_real_, ciLower = NA_real_, ciUpper = NA_real_)
        if (is.null(ci$error)) {
          block$estimate <- num1(ci$value$estimate)
          bounds <- as.numeric(ci$value$conf.int)
          block$ciLower <- num1(bounds[1]); block$ciUpper <- num1(bounds[2])
          expected_finite <- c(alternative != "less", alternative != "greater")
          if (any(expected_finite & !is.finite(bounds)))
            reasons$coinExactCi <- sprintf(
              "coin's confint returned lower = %s, upper = %s (no interval at this level and size); written as null",
              format(bounds[1]), format(bounds[2]))
        } else {
          reasons$coinExactCi <- paste("R refuses: coin confint:", ci$error)
        }
        if (!is.null(p$error)) reasons$coinExactP <- paste("R refuses: coin pvalue:", p$error)
        case$coinExact <- block
        w_all <- unique(c(coin_test$warnings, p$warnings, ci$warnings))
        if (length(w_all)) warnings$coinExact <- paste(w_all, collapse = "; ")
      }
      # keep the README's key order; blocks that are NULL must stay present as null
      case <- case[c("alternative", "confidenceLevel", "welch", "student", "wilcoxExact", "wilcoxNormal",
                     "wilcoxNormalUncorrected", "hodgesLehmannNormalCi", "coinExact")]
      names(case) <- c("alternative", "confidenceLevel", "welch", "student", "wilcoxExact", "wilcoxNormal",
                       "wilcoxNormalUncorrected", "hodgesLehmannNormalCi", "coinExact")
      if (length(reasons)) case$reasons <- reasons
      if (length(warnings)) case$rWarnings <- warnings
      cases[[length(cases) + 1]] <- case
    }
  }

  summaries <- list(a = summarise_group(a), b = summarise_group(b))
  list(name = d$name, description = d$description, a = I(a), b = I(b), ties = ties,
       summaries = summaries, hodgesLehmann = num1(hodges_lehmann), cases = cases)
}

started <- Sys.time()
built <- lapply(DATASETS, function(d) {
  t0 <- Sys.time()
  x <- build_dataset(d)
  message(sprintf("%-40s n_a=%5d n_b=%5d ties=%-5s %.1fs", d$name, length(d$a), length(d$b), x$ties,
                  as.numeric(Sys.time() - t0, units = "secs")))
  x
})
names(built) <- NULL

# Direction checks: coin's "greater" must mean a > b and its estimate must be a - b.
separated <- Filter(function(x) x$name == "n5-vs-5-separated", built)[[1]]
for (case in separated$cases) {
  stopifnot(case$coinExact$estimate > 0, separated$hodgesLehmann > 0)
  if (case$alternative == "greater") stopifnot(case$coinExact$p < 0.01, abs(case$coinExact$p - 1 / 252) < 1e-12)
  if (case$alternative == "less") stopifnot(case$coinExact$p > 0.99)
}

# Magnitude data set: how far R's shapiro.test W moves when the data are centred first.
for (i in seq_along(built)) if (built[[i]]$name == "magnitude-1e12") {
  for (g in c("a", "b")) {
    x <- DATASETS[["magnitude-1e12"]][[g]]
    w_raw <- shapiro.test(x)$statistic; w_centred <- shapiro.test(x - median(x))$statistic
    built[[i]]$summaries[[g]]$shapiroCentred <- list(
      w = num1(w_centred), p = num1(shapiro.test(x - median(x))$p.value),
      note = sprintf("shapiro.test(x - median(x)); relative difference of W from shapiro.test(x): %.2e",
                     abs(w_raw - w_centred) / w_centred))
  }
}

# p.adjust
padjust_vectors <- list(
  "five-sorted" = c(0.001, 0.01, 0.02, 0.04, 0.05),
  "unsorted-ties-and-one" = c(0.04, 0.01, 0.04, 1, 0.2, 0.01, 0.5),
  "tiny-and-ones" = c(1e-200, 3e-15, 0.049, 1, 1),
  "single" = c(0.03),
  "all-ones" = c(1, 1, 1),
  "ten-mixed" = c(0.01, 0.02, 0.03, 0.035, 0.04, 0.045, 0.5, 0.6, 0.9, 1),
  "all-equal" = c(0.02, 0.02, 0.02, 0.02)
)
set.seed(600)
padjust_vectors[["twenty-random"]] <- sort(round(runif(20)^3, 4))[sample.int(20)]
padjust <- lapply(names(padjust_vectors), function(nm) {
  p <- padjust_vectors[[nm]]
  list(name = nm, p = I(p), holm = I(p.adjust(p, "holm")), BH = I(p.adjust(p, "BH")))
})

# kruskal.test on two groups (its statistic is the square of the uncorrected, tie-corrected rank-sum z)
kruskal_names <- c("hollander-wolfe-wilcox-help", "student-sleep", "likert7-n12-vs-15",
                   "n20-vs-20-moderate-shift", "n10-vs-200-unequal-sizes", "scale10-n5000-vs-5000")
kruskal <- lapply(kruskal_names, function(nm) {
  d <- DATASETS[[nm]]
  k <- kruskal.test(list(d$a, d$b))
  list(dataset = nm, statistic = num1(k$statistic), df = num1(k$parameter), p = num1(k$p.value))
})

result <- list(
  note = "generated by tests/reference/make-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-fixtures.R",
  tools = list(R = R.version.string, coin = as.character(packageVersion("coin")),
               jsonlite = as.character(packageVersion("jsonlite"))),
  generated = as.character(Sys.Date()),
  datasets = built,
  padjust = padjust,
  kruskal = kruskal
)

# ---------------------------------------------------------------------------------------------------------
# write: numbers in shortest round-trip form, inserted verbatim

format_numbers <- function(x) {
  out <- rep("null", length(x))
  ok <- is.finite(x)
  v <- x[ok]
  s <- sprintf("%.15g", v)
  for (digits in 16:17) {
    bad <- as.numeric(s) != v
    if (!any(bad)) break
    s[bad] <- sprintf(paste0("%.", digits, "g"), v[bad])
  }
  stopifnot(all(as.numeric(s) == v))   # re-checked below with jsonlite's parser on the whole file
  out[ok] <- s
  out
}
verbatim <- function(x) {
  if (is.list(x) && !is.data.frame(x)) {
    keep_class <- class(x)
    y <- lapply(x, verbatim)
    if (!is.null(names(x))) names(y) <- names(x)
    return(y)
  }
  if (is.numeric(x) && !is.factor(x)) {
    s <- format_numbers(as.numeric(x))
    json <- if (length(x) == 1 && !inherits(x, "AsIs")) s else paste0("[", paste(s, collapse = ","), "]")
    return(structure(json, class = "json"))
  }
  x
}

json <- toJSON(verbatim(result), json_verbatim = TRUE, auto_unbox = TRUE, null = "null", na = "null", pretty = TRUE)
writeLines(json, OUT, useBytes = TRUE)

# ---------------------------------------------------------------------------------------------------------
# validate: reload, compare the data bit for bit, look for non-finite strings, count

text <- paste(readLines(OUT, warn = FALSE), collapse = "\n")
without_strings <- gsub('"(\\\\.|[^"\\\\])*"', '""', text, perl = TRUE)
stopifnot(!grepl("NaN|Infinity|Inf|NA", without_strings))
back <- fromJSON(OUT, simplifyVector = FALSE)
stopifnot(length(back$datasets) == length(DATASETS), length(back$datasets) >= 30)
for (i in seq_along(back$datasets)) {
  d <- back$datasets[[i]]
  stopifnot(identical(as.numeric(unlist(d$a)), DATASETS[[i]]$a), identical(as.numeric(unlist(d$b)), DATASETS[[i]]$b))
  stopifnot(length(d$cases) == length(ALTERNATIVES) * length(LEVELS))
}
# every number, in document order (null -> NA), must read back as the identical double through jsonlite's
# parser (yajl, C strtod: correctly rounded, as JSON.parse is)
numbers_in_order <- function(x) {
  if (is.null(x)) return(NA_real_)
  if (is.list(x)) return(unlist(lapply(x, numbers_in_order), use.names = FALSE))
  if (is.numeric(x)) return(ifelse(is.finite(as.numeric(x)), as.numeric(x), NA_real_))
  numeric(0)
}
written_numbers <- numbers_in_order(result)
read_numbers <- numbers_in_order(back)
stopifnot(length(written_numbers) == length(read_numbers), identical(written_numbers, read_numbers))
all_p <- unlist(lapply(back$datasets, function(d) lapply(d$cases, function(cs)
  c(cs$welch$p, cs$student$p, cs$wilcoxExact$p, cs$wilcoxNormal$p, cs$wilcoxNormalUncorrected$p, cs$coinExact$p))))
all_p <- as.numeric(all_p)
stopifnot(all(all_p >= 0 & all_p <= 1), all(all_p > 0))
message(sprintf("wrote %s: %d data sets, %d cases, %d bytes, smallest p = %.4g, in %.1f s",
                OUT, length(back$datasets), sum(vapply(back$datasets, function(d) length(d$cases), 1L)),
                file.size(OUT), min(all_p), as.numeric(Sys.time() - started, units = "secs")))
