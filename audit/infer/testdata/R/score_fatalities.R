# Reference values for the restricted score bootstrap (score_test.go):
# Poisson regression fatal ~ beertax + unemp + factor(state) + factor(year)
# on score_fatalities.csv (AER's Fatalities: 48 US states x 1982-1988), fitted
# by glm(family = poisson) under the restriction a1*beertax + a2*unemp = b0,
# imposed through an offset and a reparametrised regressor. At each restricted
# estimate it writes the coefficients, the state score sums of the beertax and
# unemp columns, c_g = a'H^-1 s_g over all 56 coefficients (H = X'diag(mu)X),
# the score statistic sum(c)/sqrt(f sum(c^2)) with the HC1 factor
# f = G/(G-1) (N-1)/(N-K), the Hessian block of (beertax, unemp) and its Schur
# complement (the inverse of the (beertax, unemp) block of H^-1).
# Run from audit/infer/testdata: Rscript R/score_fatalities.R
d <- read.csv("score_fatalities.csv")
d$state <- factor(d$state)
d$year <- factor(d$year)
X <- model.matrix(~ beertax + unemp + state + year, data = d)
N <- nrow(X); K <- ncol(X); G <- nlevels(d$state)
f <- G / (G - 1) * (N - 1) / (N - K)
ctl <- glm.control(epsilon = 1e-15, maxit = 100)
cases <- data.frame(case = c("beertax0", "beertax-0.5", "combo"),
                    a1 = c(1, 1, 1), a2 = c(0, 0, 10), b0 = c(0, -0.5, -0.5))
ref <- NULL; cl <- NULL
for (i in seq_len(nrow(cases))) {
  a1 <- cases$a1[i]; a2 <- cases$a2[i]; b0 <- cases$b0[i]
  # beta_beer = (b0 - a2 beta_unemp)/a1: eta = b0/a1 beertax + beta_unemp (unemp - a2/a1 beertax) + FE
  d$off <- b0 / a1 * d$beertax
  d$z <- d$unemp - a2 / a1 * d$beertax
  m <- glm(fatal ~ z + state + year, offset = off, family = poisson, data = d, control = ctl)
  bu <- unname(coef(m)["z"]); bb <- (b0 - a2 * bu) / a1
  mu <- fitted(m)
  S <- rowsum(X * (d$fatal - mu), d$state)
  H <- crossprod(X, X * mu)
  afull <- numeric(K); afull[2] <- a1; afull[3] <- a2
  cg <- drop(S %*% solve(H, afull))
  stat <- sum(cg) / sqrt(f * sum(cg^2))
  Hi <- solve(H)
  schur <- solve(Hi[2:3, 2:3])
  ref <- rbind(ref, data.frame(case = cases$case[i], a1 = a1, a2 = a2, b0 = b0, beertax = bb, unemp = bu,
                               stat = stat, h11 = H[2, 2], h12 = H[2, 3], h22 = H[3, 3],
                               schur11 = schur[1, 1], schur12 = schur[1, 2], schur22 = schur[2, 2]))
  cl <- rbind(cl, data.frame(case = cases$case[i], state = rownames(S), s_beertax = S[, 2], s_unemp = S[, 3], c = cg))
}
# unrestricted: CR1 (HC1) standard error of beertax, sandwich::vcovCL
suppressPackageStartupMessages(library(sandwich))
mu0 <- glm(fatal ~ beertax + unemp + state + year, family = poisson, data = d, control = ctl)
se <- sqrt(diag(vcovCL(mu0, cluster = ~state, type = "HC1")))["beertax"]
un <- data.frame(term = "beertax", estimate = unname(coef(mu0)["beertax"]), se_hc1 = unname(se))
write.csv(format(ref, digits = 15), "score_fatalities_ref.csv", row.names = FALSE, quote = FALSE)
write.csv(format(cl, digits = 15), "score_fatalities_clusters.csv", row.names = FALSE, quote = FALSE)
write.csv(format(un, digits = 15), "score_fatalities_unrestricted.csv", row.names = FALSE, quote = FALSE)
cat(sprintf("R %s, sandwich %s\n", getRversion(), packageVersion("sandwich")))
print(ref, digits = 10); print(un, digits = 10)
