# Generates tests/fixtures/r-omnibus.json: reference values for the omnibus comparison of three or more
# conditions (stats/anova.ts, stats/kruskal-wallis.ts, stats/games-howell.ts, stats/dunn.ts).
# Run from the repository root:  Rscript tests/reference/make-omnibus-fixtures.R
#
# Data: R's built-in data sets PlantGrowth (weight ~ group) and InsectSprays (count ~ spray), and invented
# data sets generated below under set.seed (3–5 conditions, unequal sizes and spreads, heavy ties on a 1–7
# item, a tiny condition of three answers, a 0–10 item, continuous values).
# Per data set:
#   welch    oneway.test(y ~ g, var.equal = FALSE): F, df1, df2, p
#   classic  oneway.test(y ~ g, var.equal = TRUE): F, df1, df2, p; etaSquared = SSb/SSt and
#            omegaSquared = (SSb − (k−1) MSw)/(SSt + MSw) from anova(lm(y ~ g)) (formulas, not a package)
#   kruskal  kruskal.test(y ~ g): statistic H, df, p; epsilonSquared = H/((N² − 1)/(N + 1))
#   pairs    every pair i < j in level order, difference i − j:
#            Games–Howell by its formula: Welch t and df, p = ptukey(|t|·√2, k, df, lower.tail = FALSE), and
#              pIntegrated, the same tail by the definition (studentized-range-reference.R; R's ptukey loses
#              accuracy in far tails)
#            Dunn by its formula (tie-corrected variance), two-sided p = 2·pnorm(−|z|), Holm by p.adjust
suppressPackageStartupMessages(library(jsonlite))
source("tests/reference/studentized-range-reference.R")

num <- function(v) if (is.null(v) || is.na(v)) NULL else structure(sprintf("%.17g", v), class = "json")
nums <- function(v) lapply(v, num)

analyse <- function(name, description, groups) {
  groups <- unname(groups)
  y <- unlist(groups)
  g <- factor(rep(seq_along(groups), sapply(groups, length)))
  k <- length(groups)
  N <- length(y)
  w <- oneway.test(y ~ g, var.equal = FALSE)
  cl <- oneway.test(y ~ g, var.equal = TRUE)
  a <- anova(lm(y ~ g))
  ssb <- a[["Sum Sq"]][1]; ssw <- a[["Sum Sq"]][2]; msw <- a[["Mean Sq"]][2]
  kw <- kruskal.test(y ~ g)
  r <- rank(y)
  t <- table(y)
  tieSum <- sum(t^3 - t)
  meanRanks <- tapply(r, g, mean)
  ns <- sapply(groups, length)
  pairs <- list()
  dunnP <- c()
  for (i in 1:(k - 1)) for (j in (i + 1):k) {
    xi <- groups[[i]]; xj <- groups[[j]]
    vi <- var(xi) / length(xi); vj <- var(xj) / length(xj)
    se <- sqrt(vi + vj)
    tt <- (mean(xi) - mean(xj)) / se
    df <- (vi + vj)^2 / (vi^2 / (length(xi) - 1) + vj^2 / (length(xj) - 1))
    ghp <- ptukey(abs(tt) * sqrt(2), k, df, lower.tail = FALSE)
    z <- (meanRanks[i] - meanRanks[j]) / sqrt((N * (N + 1) / 12 - tieSum / (12 * (N - 1))) * (1 / ns[i] + 1 / ns[j]))
    dp <- 2 * pnorm(-abs(z))
    dunnP <- c(dunnP, dp)
    pairs[[length(pairs) + 1]] <- list(i = i - 1, j = j - 1,
      gamesHowell = list(meanDifference = num(mean(xi) - mean(xj)), se = num(se), t = num(tt), df = num(df), p = num(ghp), pIntegrated = num(integratedUpper(abs(tt) * sqrt(2), k, df))),
      dunn = list(meanRankDifference = num(meanRanks[i] - meanRanks[j]), z = num(z), p = num(dp)))
  }
  holm <- p.adjust(dunnP, "holm")
  for (m in seq_along(pairs)) pairs[[m]]$dunn$pHolm <- num(holm[m])
  list(name = name, description = description,
       groups = lapply(groups, nums),
       welch = list(f = num(w$statistic), df1 = num(w$parameter[1]), df2 = num(w$parameter[2]), p = num(w$p.value)),
       classic = list(f = num(cl$statistic), df1 = num(cl$parameter[1]), df2 = num(cl$parameter[2]), p = num(cl$p.value),
                      etaSquared = num(ssb / (ssb + ssw)), omegaSquared = num((ssb - (k - 1) * msw) / (ssb + ssw + msw))),
       kruskal = list(h = num(kw$statistic), df = num(kw$parameter), p = num(kw$p.value),
                      epsilonSquared = num(kw$statistic / ((N^2 - 1) / (N + 1))), meanRanks = nums(as.numeric(meanRanks))),
       pairs = pairs)
}

datasets <- list()
datasets[[1]] <- analyse("PlantGrowth", "R's built-in data set PlantGrowth: weight by group (ctrl, trt1, trt2)",
                         split(PlantGrowth$weight, PlantGrowth$group))
datasets[[2]] <- analyse("InsectSprays", "R's built-in data set InsectSprays: count by spray (A–F)",
                         split(as.numeric(InsectSprays$count), InsectSprays$spray))

set.seed(20261203)
likert <- function(n, prob) as.numeric(sample(1:7, n, replace = TRUE, prob = prob))
invented <- list()
for (r in 1:6) {   # heavy ties on a 1–7 item, 3–5 conditions, unequal sizes
  k <- 3 + (r %% 3)
  invented[[length(invented) + 1]] <- list(
    name = sprintf("likert-%d", r), description = sprintf("invented 1–7 item, %d conditions, heavy ties, unequal sizes", k),
    groups = lapply(1:k, function(i) likert(sample(8:60, 1), prob = dgeom(0:6, 0.15 + 0.08 * i) + 0.02)))
}
for (r in 1:6) {   # continuous, unequal spreads and sizes
  k <- 3 + (r %% 3)
  invented[[length(invented) + 1]] <- list(
    name = sprintf("continuous-%d", r), description = sprintf("invented continuous values, %d conditions, unequal sizes and spreads", k),
    groups = lapply(1:k, function(i) rnorm(sample(5:40, 1), mean = 10 + 0.4 * i * (r %% 2), sd = 0.5 + i)))
}
for (r in 1:4) {   # one tiny condition
  k <- 3 + (r %% 3)
  gs <- lapply(1:k, function(i) round(rnorm(sample(10:30, 1), mean = 50 + 3 * i, sd = 4 + 2 * i), 1))
  gs[[k]] <- round(rnorm(3, mean = 55, sd = 6), 1)
  invented[[length(invented) + 1]] <- list(
    name = sprintf("tiny-condition-%d", r), description = sprintf("invented one-decimal values, %d conditions, the last of only three answers", k),
    groups = gs)
}
for (r in 1:4) {   # 0–10 item
  k <- 3 + (r %% 3)
  invented[[length(invented) + 1]] <- list(
    name = sprintf("zero-to-ten-%d", r), description = sprintf("invented 0–10 item, %d conditions, binomial answers of different centres", k),
    groups = lapply(1:k, function(i) as.numeric(rbinom(sample(12:80, 1), 10, 0.35 + 0.05 * i * (r %% 2)))))
}
invented[[length(invented) + 1]] <- list(
  name = "null-equal", description = "invented: five conditions from one normal distribution (no difference)",
  groups = lapply(1:5, function(i) rnorm(20 + 3 * i, 3, 1)))
invented[[length(invented) + 1]] <- list(
  name = "one-condition-apart", description = "invented: four conditions, the first shifted far from three equal others",
  groups = c(list(rnorm(25, 6, 1)), lapply(1:3, function(i) rnorm(25, 3, 1))))
for (d in invented) datasets[[length(datasets) + 1]] <- analyse(d$name, d$description, d$groups)

doc <- list(
  note = "generated by tests/reference/make-omnibus-fixtures.R — do not edit; regenerate with: Rscript tests/reference/make-omnibus-fixtures.R",
  tools = list(R = R.version.string, jsonlite = as.character(packageVersion("jsonlite"))),
  generated = format(Sys.Date()),
  datasets = datasets
)
writeLines(toJSON(doc, auto_unbox = TRUE, json_verbatim = TRUE, null = "null", pretty = TRUE),
           "tests/fixtures/r-omnibus.json", useBytes = TRUE)
