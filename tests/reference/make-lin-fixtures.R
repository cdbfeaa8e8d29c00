# Generates tests/fixtures/r-lin.json: reference values for Lin's (2013) covariate-adjusted difference with the
# HC2 standard error (stats/covariate-adjustment.ts, stats/least-squares.ts), from R's lm and
# sandwich::vcovHC(type = "HC2") (Debian r-cran-sandwich). Run from the repository root:
#   Rscript tests/reference/make-lin-fixtures.R
#
# For each data set (outcome y, condition t = 1 for a and 0 for b, covariates x1 … xk, NA = missing):
#   rows used  complete cases (rows with any covariate NA dropped)
#   adjusted   lm(y ~ t + xc + t:xc) with xc the covariates centred on their mean over the rows used;
#              estimate = coef "t", se = sqrt(vcovHC(fit, type = "HC2")["t", "t"]), df = fit$df.residual,
#              t = estimate / se, p = 2 * pt(-|t|, df), 95 % interval estimate ± qt(0.975, df) * se
#              (null with `reason` when lm reports an aliased coefficient)
#   unadjusted lm(y ~ t) on the same rows, the same quantities (df = n − 2)
#   welchSe    t.test(y[t == 1], y[t == 0])$stderr (Welch's standard error, which the unadjusted HC2 se equals)
# All data are invented (set.seed) apart from R's built-in ToothGrowth and warpbreaks.
suppressPackageStartupMessages({ library(sandwich); library(jsonlite) })

num <- function(v) if (is.null(v) || is.na(v) || !is.finite(v)) NULL else structure(sprintf("%.17g", v), class = "json")
nums <- function(v) lapply(v, num)

coefBlock <- function(fit) {
  cf <- coef(fit)
  if (any(is.na(cf))) return(list(estimate = NULL, se = NULL, t = NULL, df = NULL, p = NULL, ciLower = NULL, ciUpper = NULL,
                                  reason = paste("R: lm reports aliased coefficients:", paste(names(cf)[is.na(cf)], collapse = ", "))))
  est <- unname(cf["t"]); se <- sqrt(vcovHC(fit, type = "HC2")["t", "t"]); df <- fit$df.residual
  tt <- est / se
  list(estimate = num(est), se = num(se), t = num(tt), df = num(df), p = num(2 * pt(-abs(tt), df)),
       ciLower = num(est - qt(0.975, df) * se), ciUpper = num(est + qt(0.975, df) * se))
}

analyse <- function(name, description, y, t, X) {
  X <- as.matrix(X)
  if (ncol(X) > 0 && is.null(colnames(X))) colnames(X) <- paste0("x", seq_len(ncol(X)))
  cc <- if (ncol(X) > 0) complete.cases(X) else rep(TRUE, length(y))
  yc <- y[cc]; tc <- t[cc]
  if (ncol(X) > 0) {
    xc <- scale(X[cc, , drop = FALSE], center = TRUE, scale = FALSE)
    fit <- lm(yc ~ tc * xc)
    names(fit$coefficients)[names(fit$coefficients) == "tc"] <- "t"
  } else {
    fit <- lm(yc ~ tc); names(fit$coefficients)[2] <- "t"
  }
  # (vcovHC labels its rows and columns by names(coef(fit)), so the condition coefficient is found as "t".)
  fitU <- lm(yc ~ tc); names(fitU$coefficients)[2] <- "t"
  list(name = name, description = description,
       y = nums(y), inA = t,
       covariates = lapply(seq_len(ncol(X)), function(j) nums(X[, j])),
       covariateNames = as.list(colnames(X)),
       n = sum(cc), nA = sum(tc == 1), nB = sum(tc == 0), droppedRows = sum(!cc),
       adjusted = coefBlock(fit), unadjusted = coefBlock(fitU),
       welchSe = num(t.test(yc[tc == 1], yc[tc == 0])$stderr))
}

sets <- list()
add <- function(...) sets[[length(sets) + 1]] <<- analyse(...)
set.seed(20261203)

n1 <- 60; n0 <- 40; t <- rep(c(1, 0), c(n1, n0)); x <- rnorm(n1 + n0)
add("one-strong-covariate", "n = 60 and 40; y = 2 + 0.5 t + 1.5 x + N(0, 1)", 2 + 0.5 * t + 1.5 * x + rnorm(n1 + n0), t, cbind(x1 = x))

n1 <- 35; n0 <- 85; t <- rep(c(1, 0), c(n1, n0)); X <- cbind(x1 = rnorm(120), x2 = runif(120), x3 = rexp(120))
add("three-covariates-unequal-groups", "n = 35 and 85; effects differ by condition (interactions present)",
    1 + 0.3 * t + X %*% c(1, -2, 0.5) + t * X[, 1] * 0.8 + rnorm(120, 0, 1.5), t, X)

t <- rep(c(1, 0), c(100, 100)); X <- cbind(strong = rnorm(200), weak = rnorm(200))
add("strong-and-weak-covariate", "n = 100 and 100; one covariate strongly related to y (slope 2), one weakly (0.05)",
    0.2 * t + 2 * X[, 1] + 0.05 * X[, 2] + rnorm(200), t, X)

t <- c(1, 1, 1, 1, 1, 1, 0, 0, 0, 0, 0); x <- c(0.3, 1.2, -0.5, 2.2, 0.9, -1.1, 0.1, 1.7, -0.8, 0.4, 1.1)
add("small-n", "n = 6 and 5, one covariate (df = 7)", c(1.1, 2.3, 0.2, 3.9, 1.8, 0.4, 0.5, 2.2, -0.3, 0.9, 1.4), t, cbind(x1 = x))

t <- rep(c(1, 0), c(3000, 2800)); X <- cbind(x1 = rnorm(5800), x2 = rgamma(5800, 2))
add("large-heteroskedastic", "n = 3000 and 2800, two covariates, error sd growing with x2",
    0.1 * t + 0.7 * X[, 1] + 0.3 * X[, 2] + rnorm(5800, 0, 0.5 + 0.5 * X[, 2]), t, X)

t <- rep(c(1, 0), c(50, 70)); X <- cbind(binary = rbinom(120, 1, 0.4), age = round(runif(120, 18, 80)))
add("binary-and-age-covariates", "n = 50 and 70; a 0/1 covariate and an age-like whole number",
    3 + 0.4 * t + 0.8 * X[, 1] + 0.02 * X[, 2] + rnorm(120), t, X)

t <- rep(c(1, 0), c(80, 90)); X <- cbind(x1 = rnorm(170), x2 = rnorm(170)); yMiss <- 0.3 * t + X[, 1] + 0.5 * X[, 2] + rnorm(170)
X[sample(170, 17), 1] <- NA; X[sample(170, 9), 2] <- NA
add("missing-covariates", "n = 80 and 90; about 10 % of x1 and 5 % of x2 missing (complete cases)", yMiss, t, X)

pre <- sample(1:7, 240, TRUE, prob = c(1, 2, 3, 4, 3, 2, 1)); t <- rep(c(1, 0), 120)
post <- pmin(7, pmax(1, round(pre + 0.4 * t + rnorm(240, 0, 1))))
add("likert-pre-post", "1–7 outcome adjusted for the same 1–7 question asked before the split (heavy ties), n = 120 each", post, t, cbind(pre = pre))

t <- rep(c(1, 0), c(45, 55)); x <- 1e5 + rnorm(100, 0, 3)
add("large-offset-covariate", "a covariate near 1e5 with spread 3 (centring matters numerically)", 0.5 * t + 0.8 * (x - 1e5) + rnorm(100), t, cbind(x1 = x))

t <- rep(c(1, 0), c(30, 40))
add("no-covariates", "k = 0: the adjusted estimate is the unadjusted one", rnorm(70) + 0.3 * t, t, matrix(numeric(0), 70, 0))

t <- rep(c(1, 0), c(20, 25)); x <- rep(3, 45)
add("constant-covariate", "a covariate equal to 3 for everyone: not identified (null)", rnorm(45) + 0.2 * t, t, cbind(x1 = x))

t <- rep(c(1, 0), c(20, 25)); x <- c(rep(2, 20), rnorm(25))
add("covariate-constant-in-a", "a covariate constant within condition a: its interaction duplicates the condition (null)",
    rnorm(45) + x * 0.3, t, cbind(x1 = x))

tg <- ToothGrowth
add("toothgrowth-supp-adjusted-for-dose", "R's ToothGrowth: len by supp (a = OJ, b = VC), adjusted for dose",
    tg$len, as.numeric(tg$supp == "OJ"), cbind(dose = tg$dose))

wb <- warpbreaks
add("warpbreaks-wool-adjusted-for-tension", "R's warpbreaks: breaks by wool (a = A, b = B), adjusted for tension (indicators of M and H)",
    wb$breaks, as.numeric(wb$wool == "A"), cbind(tensionM = as.numeric(wb$tension == "M"), tensionH = as.numeric(wb$tension == "H")))

doc <- list(
  note = "generated by tests/reference/make-lin-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-lin-fixtures.R",
  tools = list(R = R.version.string, sandwich = as.character(packageVersion("sandwich")), jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  datasets = sets
)
writeLines(toJSON(doc, auto_unbox = TRUE, json_verbatim = TRUE, null = "null", pretty = TRUE),
           "tests/fixtures/r-lin.json", useBytes = TRUE)
