# Generates tests/fixtures/r-effect-sizes.json: reference values for stats/effect-sizes.ts, computed in plain
# R (Debian r-base-core; no effect-size package) for tests/stats/effect-sizes.test.ts.
#
# Run from the repository root:  Rscript tests/reference/make-effect-size-fixtures.R
#
# Definitions (plain R code below, one line each):
#   d  = (mean(a) - mean(b)) / sp,  sp = sqrt(((na-1) var(a) + (nb-1) var(b)) / (na+nb-2))      (Cohen 1988)
#   J  = Gamma(df/2) / (sqrt(df/2) Gamma((df-1)/2)), df = na+nb-2, evaluated as
#        exp(0.5 log(pi) - 0.5 log(df/2) - lbeta((df-1)/2, 1/2)) because R's lbeta() of a large and a small
#        argument avoids the cancellation that exp(lgamma(.) - lgamma(.)) suffers at df = 2e6    (Hedges 1981)
#   g  = J d
#   CI for g: t = d / sqrt(1/na + 1/nb); ncpL solves pt(t, df, ncpL) = 1 - alpha/2 and ncpU solves
#        pt(t, df, ncpU) = alpha/2 (uniroot, tol 1e-13); bounds J * ncp * sqrt(1/na + 1/nb)
#        (Steiger & Fouladi 1997 inversion, J rescaling). For df > 4e5 (beyond the region where the project
#        uses R's noncentral pt, AS 243, as a reference: see make-distribution-fixtures.R), the noncentral t
#        cdf is instead integrate() of pnorm(t s - ncp) against the density of
#        s = sqrt(chisq_df/df) around the integrand's peak (an independent quadrature, QUADPACK).
#   rankBiserial = 2W/(na nb) - 1 and probabilityOfSuperiority = W/(na nb), W = wilcox.test(a, b)$statistic.
# Data: invented with set.seed; continuous values rounded to 4 decimals so that JSON carries them exactly.
# Large integer-item samples are stored as per-value counts ("aCounts"/"bCounts" with "min").
suppressPackageStartupMessages(library(jsonlite))

n17 <- function(v) {
  s <- ifelse(is.finite(v), sprintf("%.17g", v), "null")
  structure(if (length(v) == 1) s else paste0("[", paste(s, collapse = ","), "]"), class = "json")
}

nctIntegral <- function(t, df, ncp) {
  logf <- function(s) pnorm(t * s - ncp, log.p = TRUE) + dchisq(df * s^2, df, log = TRUE) + log(2 * df * s)
  w <- 1 / sqrt(2 * df)
  peak <- optimize(logf, c(max(1e-9, 1 - 60 * w), 1 + 60 * w), maximum = TRUE, tol = 1e-12 * w)$maximum
  h <- 1e-3 * w
  sigma <- 1 / sqrt(-(logf(peak + h) - 2 * logf(peak) + logf(peak - h)) / h^2)
  top <- logf(peak)
  integrate(function(s) exp(logf(s) - top), max(0, peak - 25 * sigma), peak + 25 * sigma, rel.tol = 1e-12, subdivisions = 2000L)$value * exp(top)
}
ptNcp <- function(t, df, ncp) if (df > 4e5) nctIntegral(t, df, ncp) else pt(t, df, ncp)

effect <- function(a, b, level) {
  na <- as.numeric(length(a)); nb <- as.numeric(length(b)); df <- na + nb - 2
  sp <- sqrt(((na - 1) * var(a) + (nb - 1) * var(b)) / df)
  d <- (mean(a) - mean(b)) / sp
  J <- exp(0.5 * log(pi) - 0.5 * log(df / 2) - lbeta((df - 1) / 2, 0.5))
  s <- sqrt(1 / na + 1 / nb)
  t <- d / s
  alpha <- 1 - level
  width <- 12 * sqrt(1 + t^2 / (2 * df))
  # pt(ncp) warns "full precision may not have been achieved in 'pnt{final}'" (AS 243's ~1e-12 absolute
  # accuracy); the warnings are silenced and the tests allow for that accuracy.
  ncpL <- suppressWarnings(uniroot(function(x) ptNcp(t, df, x) - (1 - alpha / 2), c(t - width, t + width), tol = 1e-13)$root)
  ncpU <- suppressWarnings(uniroot(function(x) ptNcp(t, df, x) - alpha / 2, c(t - width, t + width), tol = 1e-13)$root)
  W <- unname(suppressWarnings(wilcox.test(a, b, exact = FALSE))$statistic)
  list(confidenceLevel = n17(level), cohensD = n17(d), J = n17(J), hedgesG = n17(J * d),
       gLower = n17(J * ncpL * s), gUpper = n17(J * ncpU * s),
       W = n17(W), rankBiserial = n17(2 * W / (na * nb) - 1), probabilityOfSuperiority = n17(W / (na * nb)))
}

r4 <- function(x) round(x, 4)
set.seed(20240601)
raw <- list(
  list(name = "sleep-cushny-peebles", description = "R's sleep data: extra hours of sleep, drug 1 (a) vs drug 2 (b); Cushny & Peebles (1905) via Student (1908)",
       a = c(0.7, -1.6, -0.2, -1.2, -0.1, 3.4, 3.7, 0.8, 0.0, 2.0), b = c(1.9, 0.8, 1.1, 0.1, -0.1, 4.4, 5.5, 1.6, 4.6, 3.4)),
  list(name = "tiny-3-vs-4", description = "smallest sizes where Hedges' g is defined with spare df", a = c(2.1, 3.5, 2.9), b = c(1.2, 0.4, 2.2, 1.0)),
  list(name = "moderate-unequal-sd", description = "normal, n 30 vs 45, sd 1 vs 2, shift 0.5", a = r4(rnorm(30, 0.5, 1)), b = r4(rnorm(45, 0, 2))),
  list(name = "large-effect", description = "normal, n 8 vs 8, shift 3 sd", a = r4(rnorm(8, 3, 1)), b = r4(rnorm(8, 0, 1))),
  list(name = "very-unequal-sizes", description = "n 5 vs 200, exponential", a = r4(rexp(5, 1)), b = r4(rexp(200, 0.7))),
  list(name = "negative-effect-50", description = "normal, n 50 vs 50, shift -0.8", a = r4(rnorm(50, -0.8, 1)), b = r4(rnorm(50, 0, 1))),
  list(name = "likert-1-7-ties", description = "integer 1..7 item with heavy ties, n 300 vs 280", a = sample(1:7, 300, TRUE, c(1, 2, 4, 6, 5, 3, 2)), b = sample(1:7, 280, TRUE, c(2, 3, 5, 6, 4, 2, 1)))
)
countsSets <- list(
  list(name = "counts-0-10-n1e5", description = "0..10 item, 1e5 answers per group as counts (df = 2e5, R's pt(ncp) is AS 243 there)",
       min = 0, aCounts = c(3, 4, 6, 8, 11, 14, 16, 13, 11, 8, 6) * 1000, bCounts = c(4, 5, 7, 9, 12, 14, 15, 12, 10, 7, 5) * 1000),
  list(name = "counts-0-100-n1e6", description = "0..100 item, 1e6 answers per group as counts (df = 2e6; reference through integrate())",
       min = 0, aCounts = as.vector(rmultinom(1, 1e6, dbinom(0:100, 100, 0.52))), bCounts = as.vector(rmultinom(1, 1e6, dbinom(0:100, 100, 0.5))))
)

levels <- c(0.90, 0.95, 0.99)
datasets <- c(
  lapply(raw, function(ds) list(name = ds$name, description = ds$description, a = n17(ds$a), b = n17(ds$b),
                                 cases = lapply(levels, function(L) effect(ds$a, ds$b, L)))),
  lapply(countsSets, function(ds) {
    a <- rep(ds$min + seq_along(ds$aCounts) - 1, ds$aCounts)
    b <- rep(ds$min + seq_along(ds$bCounts) - 1, ds$bCounts)
    list(name = ds$name, description = ds$description, min = n17(ds$min), aCounts = n17(ds$aCounts), bCounts = n17(ds$bCounts),
         cases = lapply(c(0.95), function(L) effect(a, b, L)))
  })
)

out <- list(
  note = "generated by tests/reference/make-effect-size-fixtures.R - do not edit; regenerate with: Rscript tests/reference/make-effect-size-fixtures.R",
  tools = list(R = R.version.string, jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  method = "d pooled-SD (Cohen 1988); J via lbeta; CI by uniroot inversion of pt(t, df, ncp) (integrate() for df > 4e5) times J*sqrt(1/na+1/nb); W from wilcox.test",
  datasets = datasets
)
dir.create("tests/fixtures", showWarnings = FALSE, recursive = TRUE)
writeLines(toJSON(out, auto_unbox = TRUE, json_verbatim = TRUE, pretty = TRUE), "tests/fixtures/r-effect-sizes.json")
cat("wrote tests/fixtures/r-effect-sizes.json\n")
