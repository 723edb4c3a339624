# Reference values for audit/survival, made once with Debian's r-cran-survival:
#   Rscript survival_ref.R
# Writes lung.csv (the survival package's lung data, complete cases of the
# columns used) and ref.csv (name,value), which the Go tests read.
suppressMessages(library(survival))
d <- lung[, c("inst", "time", "status", "age", "sex", "ph.ecog", "ph.karno")]
d <- d[complete.cases(d), ]
d$event <- as.integer(d$status == 2)
write.csv(d[, c("inst", "time", "event", "age", "sex", "ph.ecog", "ph.karno")], "../lung.csv", row.names = FALSE)

out <- data.frame(name = character(), value = numeric())
add <- function(n, v) out <<- rbind(out, data.frame(name = n, value = v))

# Kaplan-Meier, Greenwood variance, log-log 95% band.
km <- survfit(Surv(time, event) ~ 1, data = d, conf.type = "log-log")
s <- summary(km, times = c(100, 200, 365, 500, 730))
for (i in seq_along(s$time)) {
  add(sprintf("km.surv.%g", s$time[i]), s$surv[i])
  add(sprintf("km.se.%g", s$time[i]), s$std.err[i])
  add(sprintf("km.lower.%g", s$time[i]), s$lower[i])
  add(sprintf("km.upper.%g", s$time[i]), s$upper[i])
  add(sprintf("km.nrisk.%g", s$time[i]), s$n.risk[i])
}
add("km.median", summary(km)$table["median"])

# Log-rank: sex, plain and stratified by ph.ecog.
lr <- survdiff(Surv(time, event) ~ sex, data = d)
add("logrank.chisq", lr$chisq)
add("logrank.obs1", lr$obs[1]); add("logrank.exp1", lr$exp[1])
lrs <- survdiff(Surv(time, event) ~ sex + strata(ph.ecog), data = d)
add("logrank.strat.chisq", lrs$chisq)

# Cox: age + ph.karno + sex, Efron (R's default) and Breslow ties.
for (ties in c("efron", "breslow")) {
  f <- coxph(Surv(time, event) ~ age + ph.karno + sex, data = d, ties = ties)
  for (j in 1:3) {
    add(sprintf("cox.%s.coef.%d", ties, j), coef(f)[j])
    add(sprintf("cox.%s.se.%d", ties, j), sqrt(diag(vcov(f)))[j])
  }
  add(sprintf("cox.%s.loglik", ties), f$loglik[2])
  # Stratified by ph.ecog, robust variance clustered by institution.
  g <- coxph(Surv(time, event) ~ age + ph.karno + sex + strata(ph.ecog), data = d, ties = ties, cluster = inst)
  for (j in 1:3) {
    add(sprintf("cox.%s.strat.coef.%d", ties, j), coef(g)[j])
    add(sprintf("cox.%s.strat.se.%d", ties, j), sqrt(diag(vcov(f <- g)))[j])
    add(sprintf("cox.%s.strat.naivese.%d", ties, j), sqrt(diag(g$naive.var))[j])
  }
  add(sprintf("cox.%s.strat.loglik", ties), g$loglik[2])
}
add("R.version", as.numeric(paste0(R.version$major, ".", gsub("\\.", "", R.version$minor))))
add("survival.version", as.numeric(gsub("^(\\d+)\\.(\\d+).*", "\\1.\\2", as.character(packageVersion("survival")))))
write.csv(out, "ref.csv", row.names = FALSE, quote = TRUE)
cat(sprintf("R %s, survival %s\n", R.version.string, packageVersion("survival")))
