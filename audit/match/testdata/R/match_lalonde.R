# match_lalonde.R: reference values for audit/match_test.go and audit/logit_test.go.
#
# Run once from audit/match/testdata:  Rscript R/match_lalonde.R
# Needs R with MatchIt (Debian: r-base-core, r-cran-matchit). Writes
#   lalonde.csv                the LaLonde data set as shipped in MatchIt (614 rows)
#   lalonde_glm.csv            glm(binomial) coefficients and standard errors
#   lalonde_match.csv          Mahalanobis 1:1 nearest-neighbour matches with replacement
#   lalonde_weights.csv        MatchIt's control weights for that matching
#   lalonde_balance.csv        MatchIt's balance table plus pooled-SD SMDs
#   lalonde_cov.csv            the covariance MatchIt uses for the Mahalanobis distance
#   lalonde_match_ctrlcov.csv  nearest control under the controls' own covariance
suppressPackageStartupMessages(library(MatchIt))
data("lalonde", package = "MatchIt")
cat("R", R.version.string, "MatchIt", as.character(packageVersion("MatchIt")), "\n")

d <- data.frame(id = rownames(lalonde), lalonde, stringsAsFactors = FALSE)
write.csv(d, "lalonde.csv", row.names = FALSE, quote = FALSE)

# Propensity model.
g <- glm(treat ~ age + educ + race + married + nodegree + re74 + re75,
         family = binomial, data = lalonde, control = glm.control(epsilon = 1e-14, maxit = 100))
s <- summary(g)$coefficients
write.csv(data.frame(term = rownames(s), estimate = sprintf("%.12g", s[, 1]),
                     se = sprintf("%.12g", s[, 2])),
          "lalonde_glm.csv", row.names = FALSE, quote = FALSE)
cat(sprintf("glm logLik %.10g\n", as.numeric(logLik(g))))

# Mahalanobis matching with replacement, 1:1.
m <- matchit(treat ~ age + educ + re74 + re75, data = lalonde,
             distance = "mahalanobis", replace = TRUE, ratio = 1)
mm <- m$match.matrix
# Distances to the chosen control and the count of controls at that same distance (ties).
X <- as.matrix(lalonde[, c("age", "educ", "re74", "re75")])
S <- MatchIt:::pooled_cov(X, lalonde$treat)
write.csv(data.frame(S), "lalonde_cov.csv", row.names = FALSE, quote = FALSE)
Si <- solve(S)
ctrl <- which(lalonde$treat == 0)
out <- data.frame(treated = rownames(mm), control = mm[, 1], dist = NA, ties = NA)
for (i in seq_len(nrow(mm))) {
  x <- X[rownames(mm)[i], ]
  dd <- sqrt(mahalanobis(X[ctrl, , drop = FALSE], x, Si, inverted = TRUE))
  best <- min(dd)
  out$dist[i] <- sprintf("%.12g", sqrt(mahalanobis(X[mm[i, 1], ], x, Si, inverted = TRUE)))
  out$ties[i] <- sum(abs(dd - best) <= 1e-9 * max(1, best))
}
write.csv(out, "lalonde_match.csv", row.names = FALSE, quote = FALSE)
w <- m$weights
write.csv(data.frame(id = rownames(lalonde), weight = sprintf("%.12g", w)),
          "lalonde_weights.csv", row.names = FALSE, quote = FALSE)

sm <- summary(m, standardize = TRUE)
a <- sm$sum.all
b <- sm$sum.matched
vars <- rownames(a)
# Pooled-SD SMD (Austin 2009): denominator sqrt((var_t + var_c)/2) from the unmatched sample,
# numerator the (weighted) mean difference.
tr <- lalonde$treat == 1
pooled <- sapply(vars, function(v) sqrt((var(lalonde[tr, v]) + var(lalonde[!tr, v])) / 2))
bal <- data.frame(covariate = vars,
                  mean_t_all = sprintf("%.12g", a[, "Means Treated"]),
                  mean_c_all = sprintf("%.12g", a[, "Means Control"]),
                  smd_all = sprintf("%.12g", a[, "Std. Mean Diff."]),
                  mean_t_matched = sprintf("%.12g", b[, "Means Treated"]),
                  mean_c_matched = sprintf("%.12g", b[, "Means Control"]),
                  smd_matched = sprintf("%.12g", b[, "Std. Mean Diff."]),
                  smd_pooled_all = sprintf("%.12g", (a[, "Means Treated"] - a[, "Means Control"]) / pooled),
                  smd_pooled_matched = sprintf("%.12g", (b[, "Means Treated"] - b[, "Means Control"]) / pooled))
write.csv(bal, "lalonde_balance.csv", row.names = FALSE, quote = FALSE)
print(sm)
cat("ties: treated units with more than one control at the minimum distance:", sum(out$ties > 1), "\n")

# The same nearest-control search with the covariance of the controls alone
# (stats::cov on the control rows), first control in data order on ties
# (which.min), written to lalonde_match_ctrlcov.csv.
Sc <- solve(cov(X[ctrl, ]))
cc <- data.frame(treated = rownames(mm), control = NA, dist = NA)
for (i in seq_len(nrow(mm))) {
  dd <- sqrt(mahalanobis(X[ctrl, , drop = FALSE], X[rownames(mm)[i], ], Sc, inverted = TRUE))
  j <- which.min(dd)
  cc$control[i] <- rownames(X)[ctrl][j]
  cc$dist[i] <- sprintf("%.12g", dd[j])
}
write.csv(cc, "lalonde_match_ctrlcov.csv", row.names = FALSE, quote = FALSE)
