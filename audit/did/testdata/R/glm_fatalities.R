# Writes glm_fatalities.csv (AER package data set Fatalities: 48 US states x
# 1982-1988, traffic deaths "fatal") and glm_fatalities_ref.csv: Poisson
# regression fatal ~ beertax + unemp + factor(state) + factor(year) fitted by
# glm(family = poisson) with state-clustered standard errors from
# sandwich::vcovCL(type = "HC1"). Run from audit/did/testdata: Rscript R/glm_fatalities.R
suppressPackageStartupMessages({library(AER); library(sandwich)})
data("Fatalities", package = "AER")
d <- Fatalities[, c("state", "year", "fatal", "beertax", "unemp")]
d$state <- as.character(d$state)
d$year <- as.integer(as.character(d$year))
write.csv(d, "glm_fatalities.csv", row.names = FALSE)
m <- glm(fatal ~ beertax + unemp + factor(state) + factor(year), family = poisson, data = d,
         control = glm.control(epsilon = 1e-14, maxit = 100))
v <- vcovCL(m, cluster = ~state, type = "HC1")
terms <- c("beertax", "unemp")
ref <- data.frame(term = terms, estimate = unname(coef(m)[terms]),
                  se_glm = unname(sqrt(diag(vcov(m)))[terms]),
                  se_state = unname(sqrt(diag(v))[terms]))
write.csv(format(ref, digits = 15), "glm_fatalities_ref.csv", row.names = FALSE, quote = FALSE)
cat(sprintf("R %s, AER %s, sandwich %s\n", getRversion(), packageVersion("AER"), packageVersion("sandwich")))
print(ref, digits = 10)
