# Generates tests/fixtures/r-distributions.json: reference values of the distribution functions that
# stats/distributions.ts implements, computed by R (Debian r-base-core) for tests/stats/distributions.test.ts.
#
# Run from the repository root:  Rscript tests/reference/make-distribution-fixtures.R
#
# Every number is written with 17 significant digits (sprintf "%.17g"), because jsonlite's own output
# stops at 15. Values that R computes by an approximation are marked in their section's "method" text:
#   - pt(t, df): R's help page says the central pt uses a normal approximation in places; the df = 1e6 points
#     are checked with a looser bound (1e-10) than the rest (1e-12);
#   - pt(t, df, ncp) is Lenth's AS 243 according to R's help page (AS 243 is accurate to ~1e-12 absolute,
#     and the help page warns that the noncentral code is not highly accurate in the tails or for large
#     values), so it is used only for df <= 4e5 (the project's choice of a moderate region) and
#     probabilities >= 1e-10; the large-df and small-tail noncentral references are instead an independent
#     numerical integral (R's integrate(), QUADPACK dqags) of the mixture P(T <= t) = E[pnorm(t * S - ncp)],
#     S = sqrt(chi^2_df / df), around the peak of the integrand.
suppressPackageStartupMessages(library(jsonlite))

n17 <- function(v) {
  s <- ifelse(is.finite(v), sprintf("%.17g", v), "null")
  structure(if (length(v) == 1) s else paste0("[", paste(s, collapse = ","), "]"), class = "json")
}
rows <- function(df) lapply(seq_len(nrow(df)), function(i) lapply(as.list(df[i, , drop = FALSE]), function(x) n17(x)))

keep <- function(p) is.finite(p) & p >= 1e-300 & p <= 1

# ---- normal --------------------------------------------------------------------------------------
z <- c(0, 0.25, 0.5, 0.66291, 0.7, 1, 1.5, 1.96, 2.5, 3, 4, 5, 5.656, 5.66, 6, 8, 10, 12, 15, 20, 25, 30, 33, 35, 37, -0.5, -1, -3, -10, -30)
normalUpper <- data.frame(z = z, p = pnorm(z, lower.tail = FALSE))
normalUpper <- normalUpper[keep(normalUpper$p), ]
zl <- c(-37, -30, -20, -10, -5, -2, -1, -0.3, 0.3, 1, 2, 5)
normalLower <- data.frame(z = zl, p = pnorm(zl))
pq <- c(1e-300, 1e-250, 1e-200, 1e-100, 1e-50, 1e-20, 1e-10, 1e-5, 1e-3, 0.01, 0.025, 0.05, 0.075, 0.1, 0.3, 0.5, 0.7, 0.9, 0.925, 0.95, 0.975, 0.99, 0.999, 1 - 1e-10)
normalQuantile <- data.frame(p = pq, z = qnorm(pq))

# ---- Student t -----------------------------------------------------------------------------------
dfs <- c(1, 2, 2.5, 3, 5, 10, 17.776, 30, 100, 1000, 1e4, 1e5, 4e5, 1e6)
ts <- c(0.01, 0.1, 0.5, 1, 2, 2.228, 3, 5, 10, 30, 100, 1e3, 1e5, 1e10, 1e50, 1e100)
g <- expand.grid(t = ts, df = dfs)
studentUpper <- data.frame(t = g$t, df = g$df, p = pt(g$t, g$df, lower.tail = FALSE))
studentUpper <- studentUpper[keep(studentUpper$p), ]
g2 <- expand.grid(t = c(-1e20, -1e3, -40, -8, -2.5, -0.7, 0.7, 3), df = c(1, 3, 7.3, 25, 1e3, 1e5))
studentLower <- data.frame(t = g2$t, df = g2$df, p = pt(g2$t, g2$df))
studentLower <- studentLower[keep(studentLower$p), ]
g3 <- expand.grid(p = c(1e-300, 1e-100, 1e-20, 1e-10, 1e-4, 0.001, 0.005, 0.025, 0.05, 0.1, 0.25, 0.4, 0.6, 0.9, 0.95, 0.975, 0.995, 0.999),
                  df = c(1, 2, 3, 4.5, 10, 17.776, 30, 100, 1e4, 1e6))
studentQuantile <- data.frame(p = g3$p, df = g3$df, t = qt(g3$p, g3$df))
studentQuantile <- studentQuantile[is.finite(studentQuantile$t), ]

# ---- chi-square ----------------------------------------------------------------------------------
chi <- do.call(rbind, lapply(c(1, 2, 3, 5, 10, 50, 100, 1000, 1e4), function(df) {
  x <- df + c(-0.9, -0.5, 0, 1, 2, 5, 10, 30, 60, 100) * sqrt(2 * df)
  x <- c(x, df * c(3, 10, 30), 1e-3)
  x <- x[x > 0]
  data.frame(x = x, df = df, p = pchisq(x, df, lower.tail = FALSE))
}))
chiSquareUpper <- chi[keep(chi$p), ]

# ---- noncentral t (AS 243 region) ----------------------------------------------------------------
g4 <- expand.grid(t = c(-3, -0.5, 0.5, 2, 5, 15, 40), df = c(1, 3, 10, 30, 100, 1000, 1e5), ncp = c(-5, -1, 0.5, 2, 10, 30))
nct <- data.frame(t = g4$t, df = g4$df, ncp = g4$ncp, p = suppressWarnings(pt(g4$t, g4$df, g4$ncp)))
nct <- nct[is.finite(nct$p) & nct$p >= 1e-10 & nct$p <= 1 - 1e-10, ]

# ---- noncentral t, large df: integrate() of the mixture ------------------------------------------
nctIntegral <- function(t, df, ncp, lower) {
  # log of the integrand in s; its peak is located with optimize() and the integral is taken over
  # +-25 curvature widths around it (a fixed wide range makes QUADPACK miss the narrow peak).
  logf <- function(s) pnorm(t * s - ncp, lower.tail = lower, log.p = TRUE) + dchisq(df * s^2, df, log = TRUE) + log(2 * df * s)
  w <- 1 / sqrt(2 * df)
  peak <- optimize(logf, c(max(1e-9, 1 - 60 * w), 1 + 60 * w), maximum = TRUE, tol = 1e-12 * w)$maximum
  h <- 1e-3 * w
  curvature <- -(logf(peak + h) - 2 * logf(peak) + logf(peak - h)) / h^2
  sigma <- 1 / sqrt(curvature)
  top <- logf(peak)
  g <- function(s) exp(logf(s) - top)
  integrate(g, max(0, peak - 25 * sigma), peak + 25 * sigma, rel.tol = 1e-12, subdivisions = 2000L)$value * exp(top)
}
# The first eight: large df, outside the AS 243 region above. The last four: small tails where
# AS 243's absolute accuracy (~1e-11) leaves few correct digits, e.g. pt(5, 1, 30) = 4.0165e-9.
big <- data.frame(
  t   = c(2.5, 2.5, 300, 300, 1000, 50, -10, 5, 5, 2, 5, -3),
  df  = c(4e5, 1e6, 2e6, 2e6, 2e6, 1e6, 1e6, 2e6, 1, 3, 1e5, 1e5),
  ncp = c(2, 2, 290, 295, 1005, 45, -12, 3, 30, 10, 10, 2),
  lowerTail = c(TRUE, TRUE, FALSE, TRUE, TRUE, FALSE, TRUE, FALSE, TRUE, TRUE, TRUE, TRUE)
)
big$p <- mapply(nctIntegral, big$t, big$df, big$ncp, big$lowerTail)

# ---- special functions ---------------------------------------------------------------------------
lx <- c(1e-10, 0.01, 0.5, 1, 1.5, 2, 2.5, 3.7, 9.9, 10, 10.3, 50.5, 1e3 + 0.5, 1e6, 1e9)
logGamma <- data.frame(x = lx, value = lgamma(lx))
g5 <- data.frame(
  x = c(0.001, 1e-10, 0.3, 0.5, 0.9, 0.99, 0.999999, 0.2, 0.7, 0.5, 0.4, 0.999, 1e-5, 0.5),
  a = c(5, 50, 2.5, 0.5, 0.5, 100, 3, 1e3, 1e3, 5e5, 0.5, 0.5, 1, 20),
  b = c(0.5, 0.5, 7, 0.5, 20, 0.5, 0.5, 2e3, 400, 0.5, 3e4, 1e3, 1, 20)
)
incompleteBeta <- data.frame(x = g5$x, a = g5$a, b = g5$b, lower = pbeta(g5$x, g5$a, g5$b), upper = pbeta(g5$x, g5$a, g5$b, lower.tail = FALSE))
lb <- c(1e-300, 1e-10, 0.01, 0.5, 1, 2.5, 9.99, 10, 10.01, 30.5, 1e3, 1e5 + 0.5, 1e9, 1e15)
g6 <- expand.grid(a = lb, b = lb)
g6 <- g6[g6$a <= g6$b, ]
logBeta <- data.frame(a = g6$a, b = g6$b, value = lbeta(g6$a, g6$b))

out <- list(
  note = "generated by tests/reference/make-distribution-fixtures.R - do not edit; regenerate with: Rscript tests/reference/make-distribution-fixtures.R",
  tools = list(R = R.version.string, jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  normalUpper = list(method = "pnorm(z, lower.tail = FALSE)", cases = rows(normalUpper)),
  normalLower = list(method = "pnorm(z)", cases = rows(normalLower)),
  normalQuantile = list(method = "qnorm(p)", cases = rows(normalQuantile)),
  studentUpper = list(method = "pt(t, df, lower.tail = FALSE)", cases = rows(studentUpper)),
  studentLower = list(method = "pt(t, df)", cases = rows(studentLower)),
  studentQuantile = list(method = "qt(p, df)", cases = rows(studentQuantile)),
  chiSquareUpper = list(method = "pchisq(x, df, lower.tail = FALSE)", cases = rows(chiSquareUpper)),
  noncentralT = list(method = "pt(t, df, ncp) (AS 243), df <= 4e5, 1e-10 <= p <= 1 - 1e-10", cases = rows(nct)),
  noncentralTIntegral = list(
    method = "integrate() (QUADPACK) of pnorm(t*s - ncp) (lowerTail) or pnorm(t*s - ncp, lower.tail = FALSE) against the density of S = sqrt(chisq_df/df), over +-25 widths around the peak of the integrand, rel.tol = 1e-12",
    cases = lapply(seq_len(nrow(big)), function(i) list(t = n17(big$t[i]), df = n17(big$df[i]), ncp = n17(big$ncp[i]), lowerTail = big$lowerTail[i], p = n17(big$p[i])))
  ),
  logGamma = list(method = "lgamma(x)", cases = rows(logGamma)),
  logBeta = list(method = "lbeta(a, b), a <= b", cases = rows(logBeta)),
  incompleteBeta = list(method = "pbeta(x, a, b) and pbeta(x, a, b, lower.tail = FALSE) (TOMS 708)", cases = rows(incompleteBeta))
)
dir.create("tests/fixtures", showWarnings = FALSE, recursive = TRUE)
writeLines(toJSON(out, auto_unbox = TRUE, json_verbatim = TRUE, pretty = TRUE), "tests/fixtures/r-distributions.json")
cat("wrote tests/fixtures/r-distributions.json\n")
