# Generates tests/fixtures/r-weighted.json: reference values of R's survey package (Debian r-cran-survey) for
# the weighted comparison in stats/ (weighted-sample.ts, weighted-ttest.ts, weighted-rank-test.ts).
# Run from the repository root:  Rscript tests/reference/make-weighted-fixtures.R
#
# Every data set is analysed as a weights-only design, svydesign(id = ~1, weights = ~w), with the outcome y by a
# two-level condition g (level "a" first, so differences are a − b):
#   tTest      svyttest(y ~ g)  → difference, se, t, df, p, 95 % interval (confint on the svyglm coefficient)
#                                  (svyttest reports mean(b) − mean(a) for factor levels a, b; the sign is flipped here)
#   rankTest   svyranktest(y ~ g) (Lumley & Scott 2013) → estimate, t, df, p   (same sign flip)
#   midRank    the paper's rank test written out: mid-ranks from the estimated population CDF,
#              r = (F̂(y−) + F̂(y)) / 2 with F̂(y) = Σ w·1(y_i ≤ y) / Σ w, then svyglm(r ~ g) → estimate, se, t, df, p
#   groups     per condition, on that condition's answers alone: svymean, sqrt(svyvar), svyquantile(qrule = "math")
#              at 0.25, 0.5, 0.75, Kish's effective n (Σw)²/Σw² and n Σw²/(Σw)² (= 1 + CV² of the weights)
# `tiesWithUnequalWeights` is true when two tied answers carry different weights; svyranktest's answer then
# depends on the row order of the data (recorded: `rankTestReversedRows`, the same call on the rows reversed).
# All data apart from `api`'s apistrat are invented, generated under set.seed.
suppressPackageStartupMessages({ library(survey); library(jsonlite) })

num <- function(v) if (is.null(v) || is.na(v) || !is.finite(v)) NULL else structure(sprintf("%.17g", v), class = "json")
nums <- function(v) lapply(v, num)

analyse <- function(name, description, ya, wa, yb, wb) {
  df <- data.frame(y = c(ya, yb), w = c(wa, wb), g = factor(c(rep("a", length(ya)), rep("b", length(yb))), levels = c("a", "b")))
  d <- svydesign(id = ~1, weights = ~w, data = df)
  tt <- svyttest(y ~ g, d)
  m <- svyglm(y ~ g, d)
  ci <- confint(m, level = 0.95, df = degf(d) - 1)["gb", ]
  tTest <- list(difference = num(-unname(tt$estimate)), se = num(unname(SE(m)["gb"])), t = num(-unname(tt$statistic)),
                df = num(unname(tt$parameter)), p = num(unname(tt$p.value)), ciLower = num(-ci[2]), ciUpper = num(-ci[1]))
  rk <- function(data) {
    r <- svyranktest(y ~ g, svydesign(id = ~1, weights = ~w, data = data))
    list(estimate = num(-unname(r$estimate)), t = num(-unname(r$statistic)), df = num(unname(r$parameter)), p = num(unname(r$p.value)))
  }
  N <- sum(df$w)
  Fle <- sapply(df$y, function(v) sum(df$w[df$y <= v])) / N
  Flt <- sapply(df$y, function(v) sum(df$w[df$y < v])) / N
  df$r <- (Fle + Flt) / 2
  mr <- svyglm(r ~ g, svydesign(id = ~1, weights = ~w, data = df))
  cf <- summary(mr, df.resid = degf(d) - 1)$coefficients["gb", ]
  midRank <- list(estimate = num(-cf[1]), se = num(cf[2]), t = num(-cf[3]), df = num(degf(d) - 1), p = num(cf[4]))
  tiesUnequal <- any(tapply(df$w, df$y, function(x) length(unique(x)) > 1))
  group <- function(y, w) {
    gd <- svydesign(id = ~1, weights = ~w, data = data.frame(y = y, w = w))
    q <- coef(svyquantile(~y, gd, quantiles = c(0.25, 0.5, 0.75), qrule = "math", ci = FALSE))
    list(n = length(y), totalWeight = num(sum(w)), mean = num(unname(coef(svymean(~y, gd)))),
         sd = if (length(y) > 1) num(sqrt(unname(coef(svyvar(~y, gd))))) else NULL,
         q1 = num(unname(q[1])), median = num(unname(q[2])), q3 = num(unname(q[3])),
         nEff = num(sum(w)^2 / sum(w^2)), designEffect = num(length(w) * sum(w^2) / sum(w)^2))
  }
  list(name = name, description = description,
       a = list(y = nums(ya), w = nums(wa)), b = list(y = nums(yb), w = nums(wb)),
       tiesWithUnequalWeights = tiesUnequal,
       groups = list(a = group(ya, wa), b = group(yb, wb)),
       tTest = tTest, rankTest = rk(df), rankTestReversedRows = rk(df[nrow(df):1, ]), midRank = midRank)
}

sets <- list()
add <- function(...) sets[[length(sets) + 1]] <<- analyse(...)

data(api)
add("apistrat-api00-by-comp-imp",
    "R's apistrat (survey package): api00 by comp.imp, weights pw; a = comp.imp Yes, b = No (so the difference is Yes − No, as svyttest reports it)",
    apistrat$api00[apistrat$comp.imp == "Yes"], apistrat$pw[apistrat$comp.imp == "Yes"],
    apistrat$api00[apistrat$comp.imp == "No"], apistrat$pw[apistrat$comp.imp == "No"])

set.seed(20261203)
lik <- function(n, p) sample(1:7, n, replace = TRUE, prob = p)
add("small-continuous", "n = 8 and 6, normal outcome, log-normal weights",
    round(rnorm(8, 5, 2), 3), exp(rnorm(8, 0, 0.5)), round(rnorm(6, 4, 2), 3), exp(rnorm(6, 0, 0.5)))
add("tiny", "n = 3 and 2 (df = 3)", c(1.5, 2.25, 4), c(1, 2.5, 0.75), c(0.5, 3.5), c(2, 1.25))
add("medium-continuous", "n = 50 and 60, normal outcome, uniform(0.5, 2) weights",
    rnorm(50, 10, 3), runif(50, 0.5, 2), rnorm(60, 9, 3.5), runif(60, 0.5, 2))
add("large-continuous", "n = 2000 and 1800, normal outcome, gamma(2) weights",
    rnorm(2000, 0.1, 1), rgamma(2000, 2), rnorm(1800, 0, 1.2), rgamma(1800, 2))
add("likert-heavy-ties", "1–7 item, n = 150 and 140, weights from three levels plus noise",
    lik(150, c(1, 2, 3, 4, 3, 2, 1)), sample(c(0.6, 1, 2.4), 150, TRUE) * runif(150, 0.9, 1.1),
    lik(140, c(1, 1, 2, 3, 4, 3, 2)), sample(c(0.6, 1, 2.4), 140, TRUE) * runif(140, 0.9, 1.1))
wv <- c(0.8, 1.3, 0.9, 1.7, 1.1, 0.6, 2.2)
ya <- lik(120, c(2, 2, 3, 4, 3, 2, 1)); yb <- lik(110, c(1, 2, 2, 3, 4, 3, 2))
add("likert-ties-equal-weight-per-value", "1–7 item whose weight is a function of the answer, so tied answers carry equal weights",
    ya, wv[ya], yb, wv[yb])
add("likert-extreme-weights", "1–7 item, n = 80 and 90, weights log-normal with sd 1.5 (ratio of extremes in the thousands)",
    lik(80, rep(1, 7)), exp(rnorm(80, 0, 1.5)), lik(90, c(3, 3, 2, 2, 1, 1, 1)), exp(rnorm(90, 0, 1.5)))
wa <- rep(1, 40); wa[7] <- 500
add("one-dominant-weight", "n = 40 and 45, all weights 1 except one of 500 in a",
    rnorm(40, 3, 1), wa, rnorm(45, 3, 1), rep(1, 45))
add("weights-span-six-decades", "n = 30 and 35, weights 10^uniform(−3, 3)",
    rnorm(30), 10^runif(30, -3, 3), rnorm(35, 0.5), 10^runif(35, -3, 3))
add("zero-to-ten", "0–10 item, n = 500 and 480, weights gamma(0.7)",
    sample(0:10, 500, TRUE), rgamma(500, 0.7), sample(0:10, 480, TRUE, prob = 11:1), rgamma(480, 0.7))
add("equal-weights", "all weights 2.5 (weighted and unweighted means coincide)",
    rnorm(25, 1), rep(2.5, 25), rnorm(30, 0.4), rep(2.5, 30))
add("integer-weights", "frequency-like whole-number weights 1–5, n = 60 and 55",
    rnorm(60, 20, 4), sample(1:5, 60, TRUE), rnorm(55, 21, 4), sample(1:5, 55, TRUE))
add("unequal-sizes", "n = 20 and 300, weights uniform(0.2, 5)",
    rnorm(20, 1, 2), runif(20, 0.2, 5), rnorm(300, 0, 1), runif(300, 0.2, 5))
add("binary-item", "0/1 item, n = 200 and 210, weights gamma(3)",
    rbinom(200, 1, 0.45), rgamma(200, 3), rbinom(210, 1, 0.35), rgamma(210, 3))
add("large-magnitude", "values near 1e6 with spread 10, weights uniform(1, 3)",
    1e6 + rnorm(40, 0, 10), runif(40, 1, 3), 1e6 + rnorm(35, 5, 10), runif(35, 1, 3))
add("negative-values", "values around −50, weights exp(1)",
    rnorm(45, -50, 8), rexp(45), rnorm(50, -48, 8), rexp(50))
add("skewed-outcome", "exponential outcome, n = 100 and 90, weights informative (larger for larger y in a)",
    (ya2 <- rexp(100, 0.5)), 0.5 + ya2 / 4, rexp(90, 0.6), runif(90, 0.5, 1.5))
add("one-constant-group", "group a constant (all 4), group b varies",
    rep(4, 12), runif(12, 0.5, 2), sample(1:7, 15, TRUE), runif(15, 0.5, 2))
add("five-point-small-ties", "1–5 item, n = 12 and 10, weights uniform(0.3, 3)",
    sample(1:5, 12, TRUE), runif(12, 0.3, 3), sample(1:5, 10, TRUE), runif(10, 0.3, 3))
add("large-likert-5000", "1–7 item, n = 5000 and 5200, weights log-normal sd 0.8",
    lik(5000, c(1, 2, 4, 6, 4, 2, 1)), exp(rnorm(5000, 0, 0.8)), lik(5200, c(1, 2, 4, 6, 5, 3, 1)), exp(rnorm(5200, 0, 0.8)))
add("no-ties-continuous-200", "n = 100 and 100, distinct values, weights uniform(0.1, 10)",
    rnorm(100, 0.3), runif(100, 0.1, 10), rnorm(100), runif(100, 0.1, 10))
add("shift-large-difference", "clear difference (2 SDs), n = 30 and 30, weights gamma(1.5)",
    rnorm(30, 2), rgamma(30, 1.5), rnorm(30, 0), rgamma(30, 1.5))

# apistrat exactly as shipped (rows in their own order, factor levels No, Yes): the figures quoted for survey 4.1.1.
dApi <- svydesign(id = ~1, weights = ~pw, data = apistrat)
ttApi <- svyttest(api00 ~ comp.imp, dApi)
rkApi <- svyranktest(api00 ~ comp.imp, dApi)
apistratAsShipped <- list(
  description = "svyttest / svyranktest(api00 ~ comp.imp) on svydesign(id = ~1, weights = ~pw, data = apistrat), rows as shipped; estimates are Yes − No",
  tTest = list(difference = num(unname(ttApi$estimate)), t = num(unname(ttApi$statistic)), df = num(unname(ttApi$parameter)), p = num(unname(ttApi$p.value))),
  rankTest = list(estimate = num(unname(rkApi$estimate)), t = num(unname(rkApi$statistic)), df = num(unname(rkApi$parameter)), p = num(unname(rkApi$p.value))))

doc <- list(
  note = "generated by tests/reference/make-weighted-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-weighted-fixtures.R",
  tools = list(R = R.version.string, survey = as.character(packageVersion("survey")), jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  dfRule = "svyttest and svyranktest use df = degf(design) - 1 = n - 2 for svydesign(id = ~1, weights = ~w) on n answers",
  apistratAsShipped = apistratAsShipped,
  datasets = sets
)
writeLines(toJSON(doc, auto_unbox = TRUE, json_verbatim = TRUE, null = "null", pretty = TRUE),
           "tests/fixtures/r-weighted.json", useBytes = TRUE)
