# Generates tests/fixtures/r-planning.json: reference values for stats/planning.ts.
# Run from the repository root:  Rscript tests/reference/make-planning-fixtures.R
# Needs R (Debian r-base-core), pwr (Debian r-cran-pwr) and jsonlite. All inputs are invented planning scenarios.
#
#  powerTTest      stats::power.t.test(delta, sd, sig.level, power, type = "two.sample", alternative, strict = TRUE):
#                  the continuous n, and the power at ceiling(n) and at ceiling(n) - 1 (equal group sizes).
#  pwrT2n          pwr::pwr.t2n.test(n1, n2, d, sig.level, alternative)$power for given sizes.
#  ratioPlans      the smallest whole n1 >= 2 with n2 = ceiling(ratio * n1) whose pwr.t2n.test power reaches the
#                  target, found here by a plain upward scan (an independent implementation of the rule in
#                  planning.ts), with the power at n1 and at n1 - 1.
#  noether         Noether (1987) by formula: power(n1, n2) = pnorm(sqrt(12 n1 n2 / (n1 + n2)) * |p - 1/2| - qnorm(1 - alpha/s)),
#                  p = pnorm(d / sqrt(2)) or given; smallest n1 by upward scan as above. Computed by formula in R
#                  (no packaged function), so it checks the arithmetic, not the method.
suppressPackageStartupMessages({ library(jsonlite); library(pwr) })

num <- function(v) structure(sprintf("%.17g", v), class = "json")   # jsonlite prints 15 digits at most

power_t_test_cases <- list(
  list(delta = 5, sd = 12, sig.level = 0.05, power = 0.80, alternative = "two.sided"),
  list(delta = 0.5, sd = 1, sig.level = 0.05, power = 0.80, alternative = "two.sided"),
  list(delta = 0.2, sd = 1, sig.level = 0.05, power = 0.90, alternative = "two.sided"),
  list(delta = 1.5, sd = 1, sig.level = 0.05, power = 0.80, alternative = "two.sided"),
  list(delta = 0.3, sd = 1, sig.level = 0.01, power = 0.95, alternative = "two.sided"),
  list(delta = 0.05, sd = 1, sig.level = 0.05, power = 0.80, alternative = "two.sided"),
  list(delta = 0.4, sd = 1, sig.level = 0.05, power = 0.80, alternative = "one.sided"),
  list(delta = 2, sd = 3, sig.level = 0.10, power = 0.85, alternative = "one.sided")
)
powerTTest <- lapply(power_t_test_cases, function(cs) {
  r <- power.t.test(delta = cs$delta, sd = cs$sd, sig.level = cs$sig.level, power = cs$power,
                    type = "two.sample", alternative = cs$alternative, strict = TRUE, tol = 1e-10)
  n <- ceiling(r$n)
  pw <- function(m) power.t.test(n = m, delta = cs$delta, sd = cs$sd, sig.level = cs$sig.level,
                                 type = "two.sample", alternative = cs$alternative, strict = TRUE)$power
  list(delta = num(cs$delta), sd = num(cs$sd), alpha = num(cs$sig.level), power = num(cs$power),
       alternative = if (cs$alternative == "two.sided") "two-sided" else "greater",
       nContinuous = num(r$n), n = n, powerAtN = num(pw(n)), powerAtNMinus1 = num(pw(n - 1)))
})

t2n_cases <- list(
  list(n1 = 64, n2 = 64, d = 0.5, sig.level = 0.05, alternative = "two.sided"),
  list(n1 = 75, n2 = 150, d = 0.4, sig.level = 0.05, alternative = "two.sided"),
  list(n1 = 20, n2 = 35, d = 0.8, sig.level = 0.05, alternative = "two.sided"),
  list(n1 = 5, n2 = 7, d = 1.2, sig.level = 0.05, alternative = "two.sided"),
  list(n1 = 300, n2 = 200, d = -0.25, sig.level = 0.01, alternative = "two.sided"),
  list(n1 = 40, n2 = 40, d = 0.5, sig.level = 0.05, alternative = "greater"),
  list(n1 = 40, n2 = 60, d = -0.5, sig.level = 0.05, alternative = "less"),
  list(n1 = 40, n2 = 60, d = 0.1, sig.level = 0.05, alternative = "less"),
  list(n1 = 1000, n2 = 1000, d = 0.1, sig.level = 0.05, alternative = "two.sided"),
  list(n1 = 3, n2 = 3, d = 0.1, sig.level = 0.05, alternative = "two.sided")
)
pwrT2n <- lapply(t2n_cases, function(cs) {
  r <- pwr.t2n.test(n1 = cs$n1, n2 = cs$n2, d = cs$d, sig.level = cs$sig.level, alternative = cs$alternative)
  list(n1 = cs$n1, n2 = cs$n2, d = num(cs$d), alpha = num(cs$sig.level),
       alternative = if (cs$alternative == "two.sided") "two-sided" else cs$alternative, power = num(r$power))
})

t2n_power <- function(n1, n2, d, a, alt) pwr.t2n.test(n1 = n1, n2 = n2, d = d, sig.level = a, alternative = alt)$power
scan_smallest <- function(powerfun, ratio, target) {
  n1 <- 2
  repeat {
    n2 <- max(2, ceiling(ratio * n1 - 1e-9))
    if (powerfun(n1, n2) >= target) return(c(n1, n2))
    n1 <- n1 + 1
  }
}

ratio_cases <- list(
  list(d = 0.4, sig.level = 0.05, power = 0.80, ratio = 2, alternative = "two.sided"),
  list(d = 0.5, sig.level = 0.05, power = 0.90, ratio = 0.5, alternative = "two.sided"),
  list(d = 0.3, sig.level = 0.05, power = 0.80, ratio = 1.5, alternative = "greater"),
  list(d = -0.6, sig.level = 0.01, power = 0.80, ratio = 3, alternative = "less"),
  list(d = 0.25, sig.level = 0.05, power = 0.80, ratio = 1, alternative = "two.sided")
)
ratioPlans <- lapply(ratio_cases, function(cs) {
  f <- function(n1, n2) t2n_power(n1, n2, cs$d, cs$sig.level, cs$alternative)
  n <- scan_smallest(f, cs$ratio, cs$power)
  prev <- if (n[1] > 2) num(f(n[1] - 1, max(2, ceiling(cs$ratio * (n[1] - 1) - 1e-9)))) else NULL
  list(d = num(cs$d), alpha = num(cs$sig.level), power = num(cs$power), ratio = num(cs$ratio),
       alternative = if (cs$alternative == "two.sided") "two-sided" else cs$alternative,
       n1 = n[1], n2 = n[2], powerAtN = num(f(n[1], n[2])), powerAtN1Minus1 = prev)
})

noether_power <- function(n1, n2, p, a, alt) {
  s <- if (alt == "two-sided") 2 else 1
  shift <- switch(alt, "two-sided" = abs(p - 0.5), greater = p - 0.5, less = 0.5 - p)
  pnorm(sqrt(12 * n1 * n2 / (n1 + n2)) * shift - qnorm(1 - a / s))
}
noether_cases <- list(
  list(d = 0.4, p = NULL, sig.level = 0.05, power = 0.80, ratio = 1, alternative = "two-sided"),
  list(d = 0.5, p = NULL, sig.level = 0.05, power = 0.90, ratio = 2, alternative = "two-sided"),
  list(d = NULL, p = 0.65, sig.level = 0.05, power = 0.80, ratio = 1, alternative = "two-sided"),
  list(d = NULL, p = 0.40, sig.level = 0.01, power = 0.80, ratio = 1, alternative = "less"),
  list(d = 0.2, p = NULL, sig.level = 0.05, power = 0.80, ratio = 0.75, alternative = "greater")
)
noether <- lapply(noether_cases, function(cs) {
  p <- if (is.null(cs$p)) pnorm(cs$d / sqrt(2)) else cs$p
  f <- function(n1, n2) noether_power(n1, n2, p, cs$sig.level, cs$alternative)
  n <- scan_smallest(f, cs$ratio, cs$power)
  list(d = if (is.null(cs$d)) NULL else num(cs$d), probabilityOfSuperiority = num(p),
       probabilityGiven = !is.null(cs$p), alpha = num(cs$sig.level), power = num(cs$power),
       ratio = num(cs$ratio), alternative = cs$alternative,
       n1 = n[1], n2 = n[2], powerAtN = num(f(n[1], n[2])),
       totalNoetherFormula = num((qnorm(1 - cs$sig.level / (if (cs$alternative == "two-sided") 2 else 1)) + qnorm(cs$power))^2 /
                                 (12 * (1 / (1 + cs$ratio)) * (cs$ratio / (1 + cs$ratio)) * (p - 0.5)^2)))
})

doc <- list(
  note = "generated by tests/reference/make-planning-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-planning-fixtures.R",
  tools = list(R = R.version.string, pwr = as.character(packageVersion("pwr")),
               jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  powerTTest = powerTTest, pwrT2n = pwrT2n, ratioPlans = ratioPlans, noether = noether
)
writeLines(toJSON(doc, auto_unbox = TRUE, json_verbatim = TRUE, null = "null", pretty = TRUE),
           "tests/fixtures/r-planning.json", useBytes = TRUE)
