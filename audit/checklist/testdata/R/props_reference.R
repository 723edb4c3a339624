# props_reference.R: reference values for audit/props_test.go.
#
# Run once from audit/checklist/testdata:  Rscript R/props_reference.R
# Base R only (stats::prop.test, stats::p.adjust). Writes
#   props_wilson.csv   one-sample prop.test(x, n, correct = FALSE): the Wilson score interval
#   props_ztest.csv    two-sample prop.test(c(x1, x2), c(n1, n2), correct = FALSE): chi-square and p
#   props_bh.csv       p.adjust(p, method = "BH")
#   props_newcombe.csv Newcombe (1998) method 10 from the prop.test Wilson limits
cat(R.version.string, "\n")
f <- function(v) sprintf("%.12g", v)

wil <- data.frame(x = c(0, 1, 5, 15, 56, 48, 81, 29, 10, 263, 1000),
                  n = c(10, 29, 50, 148, 70, 80, 263, 29, 10, 1000, 1000),
                  conf = c(0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.90, 0.99, 0.95))
wil$lower <- NA; wil$upper <- NA
for (i in seq_len(nrow(wil))) {
  r <- prop.test(wil$x[i], wil$n[i], conf.level = wil$conf[i], correct = FALSE)
  wil$lower[i] <- f(r$conf.int[1]); wil$upper[i] <- f(r$conf.int[2])
}
write.csv(wil, "props_wilson.csv", row.names = FALSE, quote = FALSE)

zt <- data.frame(x1 = c(56, 9, 5, 120, 30, 0, 44),
                 n1 = c(70, 10, 56, 400, 100, 25, 60),
                 x2 = c(48, 3, 0, 95, 30, 3, 21),
                 n2 = c(80, 10, 29, 410, 100, 25, 40))
zt$statistic <- NA; zt$p <- NA
for (i in seq_len(nrow(zt))) {
  r <- suppressWarnings(prop.test(c(zt$x1[i], zt$x2[i]), c(zt$n1[i], zt$n2[i]), correct = FALSE))
  zt$statistic[i] <- f(unname(r$statistic)); zt$p[i] <- f(r$p.value)
}
write.csv(zt, "props_ztest.csv", row.names = FALSE, quote = FALSE)

p <- c(0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
       0.4262, 0.5719, 0.6528, 0.7590, 1.0000, 0.0344, 0.0095)
write.csv(data.frame(p = f(p), q = f(p.adjust(p, method = "BH"))), "props_bh.csv",
          row.names = FALSE, quote = FALSE)

# Newcombe (1998) method 10 for p1 - p2, built from the two Wilson limits prop.test returns:
#   L = d - sqrt((p1 - l1)^2 + (u2 - p2)^2),  U = d + sqrt((u1 - p1)^2 + (p2 - l2)^2)
nc <- data.frame(x1 = c(56, 9, 6, 5, 0, 0, 10, 10, 120, 44),
                 n1 = c(70, 10, 7, 56, 10, 10, 10, 10, 400, 60),
                 x2 = c(48, 3, 2, 0, 0, 0, 0, 0, 95, 21),
                 n2 = c(80, 10, 7, 29, 20, 10, 20, 10, 410, 40))
nc$diff <- NA; nc$lower <- NA; nc$upper <- NA
for (i in seq_len(nrow(nc))) {
  a <- suppressWarnings(prop.test(nc$x1[i], nc$n1[i], correct = FALSE))$conf.int
  b <- suppressWarnings(prop.test(nc$x2[i], nc$n2[i], correct = FALSE))$conf.int
  p1 <- nc$x1[i] / nc$n1[i]; p2 <- nc$x2[i] / nc$n2[i]; d <- p1 - p2
  nc$diff[i] <- f(d)
  nc$lower[i] <- f(d - sqrt((p1 - a[1])^2 + (b[2] - p2)^2))
  nc$upper[i] <- f(d + sqrt((a[2] - p1)^2 + (p2 - b[1])^2))
}
write.csv(nc, "props_newcombe.csv", row.names = FALSE, quote = FALSE)
