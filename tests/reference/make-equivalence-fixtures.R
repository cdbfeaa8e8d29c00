# Generates tests/fixtures/r-equivalence.json: reference values for the equivalence tests (TOST) of
# stats/equivalence.ts. Run from the repository root:  Rscript tests/reference/make-equivalence-fixtures.R
#
# Cases
#   summary   the Welch TOST from summary statistics m = 5.25, 5.22; sd = 0.95, 0.83; n = 95, 89; margin 0.384,
#             α = 0.05, by the formulas in base R (pt, qt): t_lower = (d + m)/se, p_lower = pt(t_lower, df, lower = FALSE),
#             t_upper = (d − m)/se, p_upper = pt(t_upper, df), 90 % interval d ± qt(0.95, df)·se.
#   datasets  R's built-in sleep data (extra ~ group, a = group 1) and invented data sets (set.seed), each with
#             a margin and α:
#             welch   t.test(a, b, mu = −m, alternative = "greater") (lower) and t.test(a, b, mu = +m,
#                     alternative = "less") (upper): t, df, p; t.test(a, b, conf.level = 1 − 2α)$conf.int; the
#                     ordinary two-sided t.test(a, b)$p.value.
#             rankNormal  wilcox.test(a, b, mu = −m, alternative = "greater", exact = FALSE, correct = TRUE) and
#                     mu = +m "less": W, p; ordinary wilcox.test(a, b, exact = FALSE)$p.value (the project's
#                     exact = "never" regime).
#             rankExact   only for tie-free data with both n < 50 (the project's "auto" rule picks exact there):
#                     the same with exact = TRUE, and the Hodges–Lehmann interval
#                     wilcox.test(a, b, conf.int = TRUE, conf.level = 1 − 2α, exact = TRUE)$conf.int.
#             verdict  by the rules of equivalence.ts from the p-values above ("welch" from t.test,
#                     "rankNormal" from the normal-approximation p-values).
suppressPackageStartupMessages(library(jsonlite))

num <- function(v) if (is.null(v) || is.na(v)) NULL else structure(sprintf("%.17g", v), class = "json")
nums <- function(v) lapply(unname(v), num)

verdict <- function(tostP, ordinaryP, alpha) {
  if (tostP < alpha && ordinaryP >= alpha) "equivalent" else if (tostP < alpha) "trivial" else if (ordinaryP < alpha) "different" else "inconclusive"
}

# Summary-statistics Welch case
m1 <- 5.25; m2 <- 5.22; s1 <- 0.95; s2 <- 0.83; n1 <- 95; n2 <- 89; margin <- 0.384; alpha <- 0.05
v1 <- s1^2 / n1; v2 <- s2^2 / n2; se <- sqrt(v1 + v2); d <- m1 - m2
df <- (v1 + v2)^2 / (v1^2 / (n1 - 1) + v2^2 / (n2 - 1))
tl <- (d + margin) / se; tu <- (d - margin) / se
summaryCase <- list(
  a = list(n = n1, mean = m1, sd = s1), b = list(n = n2, mean = m2, sd = s2), margin = margin, alpha = alpha,
  df = num(df), tLower = num(tl), pLower = num(pt(tl, df, lower.tail = FALSE)), tUpper = num(tu), pUpper = num(pt(tu, df)),
  ciLower = num(d - qt(1 - alpha, df) * se), ciUpper = num(d + qt(1 - alpha, df) * se))

tieFree <- function(x) !any(duplicated(x))

analyse <- function(name, description, a, b, margin, alpha) {
  tl <- t.test(a, b, mu = -margin, alternative = "greater")
  tu <- t.test(a, b, mu = margin, alternative = "less")
  ci <- t.test(a, b, conf.level = 1 - 2 * alpha)$conf.int
  ordT <- t.test(a, b)$p.value
  welchP <- max(tl$p.value, tu$p.value)
  wl <- suppressWarnings(wilcox.test(a, b, mu = -margin, alternative = "greater", exact = FALSE, correct = TRUE))
  wu <- suppressWarnings(wilcox.test(a, b, mu = margin, alternative = "less", exact = FALSE, correct = TRUE))
  ordW <- suppressWarnings(wilcox.test(a, b, exact = FALSE, correct = TRUE))$p.value
  rankP <- max(wl$p.value, wu$p.value)
  out <- list(name = name, description = description, a = nums(a), b = nums(b), margin = num(margin), alpha = num(alpha),
    welch = list(df = num(tl$parameter), tLower = num(tl$statistic), pLower = num(tl$p.value),
                 tUpper = num(tu$statistic), pUpper = num(tu$p.value), ciLower = num(ci[1]), ciUpper = num(ci[2]),
                 ordinaryP = num(ordT), verdict = verdict(welchP, ordT, alpha)),
    rankNormal = list(wLower = num(wl$statistic), pLower = num(wl$p.value), wUpper = num(wu$statistic), pUpper = num(wu$p.value),
                      ordinaryP = num(ordW), verdict = verdict(rankP, ordW, alpha)),
    rankExact = NULL)
  if (tieFree(c(a + margin, b)) && tieFree(c(a - margin, b)) && tieFree(c(a, b)) && length(a) < 50 && length(b) < 50) {
    el <- wilcox.test(a, b, mu = -margin, alternative = "greater", exact = TRUE)
    eu <- wilcox.test(a, b, mu = margin, alternative = "less", exact = TRUE)
    hl <- wilcox.test(a, b, conf.int = TRUE, conf.level = 1 - 2 * alpha, exact = TRUE)
    out$rankExact <- list(wLower = num(el$statistic), pLower = num(el$p.value), wUpper = num(eu$statistic), pUpper = num(eu$p.value),
                          ordinaryP = num(hl$p.value), ciLower = num(hl$conf.int[1]), ciUpper = num(hl$conf.int[2]),
                          verdict = verdict(max(el$p.value, eu$p.value), hl$p.value, alpha))
  }
  out
}

datasets <- list()
datasets[[1]] <- analyse("sleep", "R's built-in sleep data: extra by group (a = group 1, b = group 2), margin 0.5",
                         sleep$extra[sleep$group == 1], sleep$extra[sleep$group == 2], 0.5, 0.05)
set.seed(20261204)
for (r in 1:6) {   # continuous, tie-free, small: exact regime
  na <- sample(8:40, 1); nb <- sample(8:40, 1)
  shift <- c(0, 0.1, 0.5, 1, -0.3, 2)[r]
  datasets[[length(datasets) + 1]] <- analyse(sprintf("continuous-exact-%d", r),
    "invented continuous values, tie-free, both groups under 50 (exact regime)",
    rnorm(na, 10 + shift, 1 + r / 4), rnorm(nb, 10, 1), c(0.5, 0.8, 1, 0.6, 0.4, 1.2)[r], c(0.05, 0.05, 0.1, 0.05, 0.025, 0.05)[r])
}
for (r in 1:6) {   # 1–7 item, heavy ties, larger groups: normal regime
  na <- sample(30:200, 1); nb <- sample(30:200, 1)
  pa <- dgeom(0:6, 0.2 + 0.03 * r) + 0.03; pb <- dgeom(0:6, 0.2) + 0.03
  datasets[[length(datasets) + 1]] <- analyse(sprintf("likert-normal-%d", r),
    "invented 1–7 item with heavy ties (the shifted data break the ties across groups)",
    as.numeric(sample(1:7, na, TRUE, pa)), as.numeric(sample(1:7, nb, TRUE, pb)), c(0.5, 0.25, 0.75, 1, 0.3, 0.6)[r], 0.05)
}
for (r in 1:3) {   # large continuous: normal regime without ties
  datasets[[length(datasets) + 1]] <- analyse(sprintf("continuous-normal-%d", r),
    "invented continuous values, groups over 50 (normal regime)",
    rnorm(60 + 20 * r, 0.1 * r, 1), rnorm(70, 0, 1.5), 0.4, 0.05)
}
for (r in 1:2) {   # equal distributions, many answers, a wide margin: equivalence is expected
  datasets[[length(datasets) + 1]] <- analyse(sprintf("equivalent-continuous-%d", r),
    "invented continuous values from one distribution, groups of 150–200, margin 0.4",
    rnorm(150 + 20 * r, 5, 1), rnorm(160, 5, 1), 0.4, 0.05)
  p7 <- dgeom(0:6, 0.25) + 0.03
  datasets[[length(datasets) + 1]] <- analyse(sprintf("equivalent-likert-%d", r),
    "invented 1–7 item, both groups from one distribution, 300 answers each, margin 0.5",
    as.numeric(sample(1:7, 300, TRUE, p7)), as.numeric(sample(1:7, 300, TRUE, p7)), 0.5, 0.05)
}

doc <- list(
  note = "generated by tests/reference/make-equivalence-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-equivalence-fixtures.R",
  tools = list(R = R.version.string, jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  summary = summaryCase,
  datasets = datasets
)
writeLines(toJSON(doc, auto_unbox = TRUE, json_verbatim = TRUE, null = "null", pretty = TRUE),
           "tests/fixtures/r-equivalence.json", useBytes = TRUE)
