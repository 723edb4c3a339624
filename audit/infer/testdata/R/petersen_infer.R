# Reference values for package infer (audit/infer), made once with R's
# sandwich and lmtest. Run from audit/infer/testdata: Rscript R/petersen_infer.R
#
# petersen.csv       Petersen (2009) test data as shipped in sandwich (PetersenCL).
# cr1_ref.csv        coefficients, CR1 standard errors and t statistics
#                    (sandwich::vcovCL(type = "HC1"), lmtest::coeftest) for
#                    the models listed in column model.
# wald_ref.csv       joint Wald statistics with the firm-clustered covariance:
#                    lmtest::waldtest(test = "Chisq") for all year effects,
#                    b'V^-1 b on a block of three for the first three.
# holm_ref.csv       Holm adjusted p-values, stats::p.adjust(method = "holm").
suppressPackageStartupMessages({library(sandwich); library(lmtest)})
data("PetersenCL", package = "sandwich")
d <- PetersenCL[, c("firm", "year", "x", "y")]
write.csv(d, "petersen.csv", row.names = FALSE)
# Test weights for the WLS case: a deterministic function of the firm id,
# chosen only to exercise weighting.
d$w <- 1 + d$firm %% 3
out <- NULL
add <- function(model, m, v, terms) {
  ct <- coeftest(m, vcov. = v)
  for (tm in terms) {
    out <<- rbind(out, data.frame(model = model, term = tm,
      estimate = ct[tm, 1], se = ct[tm, 2], t = ct[tm, 3]))
  }
}
m1 <- lm(y ~ x, data = d)
add("ols_firm", m1, vcovCL(m1, cluster = ~firm, type = "HC1"), c("(Intercept)", "x"))
add("ols_year", m1, vcovCL(m1, cluster = ~year, type = "HC1"), c("(Intercept)", "x"))
m2 <- lm(y ~ x + factor(year), data = d)
v2 <- vcovCL(m2, cluster = ~firm, type = "HC1")
add("year_fe_firm", m2, v2, c("x", "factor(year)2", "factor(year)10"))
# linear combination x + year2 - year10: t statistic from a'b / sqrt(a'Va)
a <- setNames(rep(0, length(coef(m2))), names(coef(m2)))
a[c("x", "factor(year)2", "factor(year)10")] <- c(1, 1, -1)
lc <- sum(a * coef(m2)); lse <- sqrt(drop(t(a) %*% v2 %*% a))
out <- rbind(out, data.frame(model = "year_fe_firm", term = "x+year2-year10",
  estimate = lc, se = lse, t = lc / lse))
m3 <- lm(y ~ x, data = d, weights = w)
add("wls_firm", m3, vcovCL(m3, cluster = ~firm, type = "HC1"), c("(Intercept)", "x"))
m4 <- lm(y ~ x + factor(firm), data = d)
add("firm_fe_firm", m4, vcovCL(m4, cluster = ~firm, type = "HC1"), c("x"))
write.csv(format(out, digits = 15), "cr1_ref.csv", row.names = FALSE, quote = FALSE)

# Joint Wald tests: all nine year effects, and the first three, both zero.
m2a <- lm(y ~ x, data = d)
w9 <- waldtest(m2a, m2, vcov = v2, test = "Chisq")
# The first three year effects: b'V^-1 b on that block of coefficients.
idx <- c("factor(year)2", "factor(year)3", "factor(year)4")
w3 <- drop(t(coef(m2)[idx]) %*% solve(v2[idx, idx]) %*% coef(m2)[idx])
wald <- data.frame(model = "year_fe_firm",
  restriction = c("year2..year10 = 0", "year2..year4 = 0"),
  q = c(w9$Df[2], 3), wald = c(w9$Chisq[2], w3))
write.csv(format(wald, digits = 15), "wald_ref.csv", row.names = FALSE, quote = FALSE)

# Holm on a chosen vector with ties and a 1.
p <- c(0.01, 0.04, 0.03, 0.005, 0.04, 0.2, 0.5, 1, 0.0001, 0.03)
write.csv(format(data.frame(p = p, holm = p.adjust(p, method = "holm")), digits = 15),
  "holm_ref.csv", row.names = FALSE, quote = FALSE)
cat(sprintf("R %s, sandwich %s, lmtest %s\n", getRversion(),
  packageVersion("sandwich"), packageVersion("lmtest")))
print(out, digits = 10); print(wald, digits = 10)
