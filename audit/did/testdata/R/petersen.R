# Writes petersen.csv (Petersen 2009 test data as shipped in R's sandwich
# package, data set PetersenCL) and petersen_ref.csv (OLS y ~ x with classic,
# firm-clustered and year-clustered standard errors, sandwich::vcovCL type HC1).
# Run from audit/did/testdata: Rscript R/petersen.R
suppressPackageStartupMessages(library(sandwich))
data("PetersenCL", package = "sandwich")
write.csv(PetersenCL[, c("firm", "year", "x", "y")], "petersen.csv", row.names = FALSE)
m <- lm(y ~ x, data = PetersenCL)
se <- function(v) sqrt(diag(v))
ref <- data.frame(
  term = names(coef(m)),
  estimate = unname(coef(m)),
  se_ols = unname(se(vcov(m))),
  se_firm = unname(se(vcovCL(m, cluster = ~firm, type = "HC1"))),
  se_year = unname(se(vcovCL(m, cluster = ~year, type = "HC1")))
)
write.csv(format(ref, digits = 15), "petersen_ref.csv", row.names = FALSE, quote = FALSE)
cat(sprintf("R %s, sandwich %s\n", getRversion(), packageVersion("sandwich")))
print(ref, digits = 10)
