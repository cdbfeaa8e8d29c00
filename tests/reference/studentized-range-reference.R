# The studentized range upper tail by its published definition, evaluated with R's integrate() (QUADPACK
# QAGS) at rel.tol 1e-13 — an independent quadrature used as a reference beside R's ptukey, which loses
# accuracy in far upper tails (see tests/stats/studentized-range.test.ts). Sourced by
# make-ptukey-fixtures.R and make-omnibus-fixtures.R; run from the repository root.
#   1 − W_k(w) = k ∫ φ(z) Φ(z − w) Σ_{j=0}^{k−2} Φ(z)^j (Φ(z) − Φ(z − w))^{k−2−j} dz
#   P(Q > q)   = ∫ f_ν(s) [1 − W_k(q s)] ds, f_ν the density of √(χ²_ν/ν), integrated over u = ln s.
rangeUpper <- function(w, k, tol = 1e-13) {
  if (w <= 0) return(1)
  f <- function(z) {
    a <- pnorm(z); b <- pnorm(z - w)
    c <- ifelse(z - w >= 0, pnorm(z - w, lower.tail = FALSE) - pnorm(z, lower.tail = FALSE), a - b)
    s <- 0
    for (j in 0:(k - 2)) s <- s + a^j * c^(k - 2 - j)
    dnorm(z) * b * s
  }
  mid <- w / 2
  k * integrate(f, mid - 10, mid + 10, rel.tol = tol, abs.tol = 0, subdivisions = 1000L)$value
}

integratedUpper <- function(q, k, df, tol = 1e-13) {
  if (is.infinite(df)) return(rangeUpper(q, k, tol))
  logdens <- function(u) {  # density of u = ln s, s = sqrt(chisq_df / df)
    s2 <- exp(2 * u)
    (df / 2) * log(df / 2) - lgamma(df / 2) + log(2) + df * u - df * s2 / 2
  }
  g <- function(u) sapply(u, function(x) exp(logdens(x)) * rangeUpper(q * exp(x), k, tol))
  mode <- 0
  sd <- 1 / sqrt(2 * df)
  lo <- -60 / df - 8 * sd - 2
  if (df <= 5) lo <- -40 / df * 1.2 - 5
  hi <- 10 * sd + 1
  # split at ln(w/q) for w = 1, 4, 8 and at the mode so that QAGS sees the shape
  cuts <- sort(unique(c(lo, hi, 0, log(c(1, 4, 8) / q))))
  cuts <- cuts[cuts >= lo & cuts <= hi]
  total <- 0
  for (i in seq_len(length(cuts) - 1)) {
    piece <- tryCatch(integrate(g, cuts[i], cuts[i + 1], rel.tol = tol, abs.tol = 0, subdivisions = 2000L)$value,
                      error = function(e) NA)
    if (is.na(piece)) return(NA)  # QAGS could not reach the tolerance: no reference value (written as null)
    total <- total + piece
  }
  total
}

