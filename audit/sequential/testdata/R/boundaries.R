# Two-sided Lan-DeMets O'Brien-Fleming-type boundaries for K equally spaced
# looks at level 0.05, computed independently of loadwake: the exit
# probabilities come from mvtnorm's deterministic Miwa algorithm over the
# canonical joint distribution corr(Z_i, Z_j) = sqrt(t_i / t_j), and each
# boundary is found with uniroot. Run once with
#   Rscript boundaries.R > boundaries.csv
# (R 4.2.2 and r-cran-mvtnorm 1.1-3 from Debian bookworm made the committed file;
# R warns that Miwa approximates the infinite limits by +-1000, which is harmless).
suppressMessages(library(mvtnorm))
alpha <- 0.05
spend <- function(t) 2 - 2 * pnorm(qnorm(1 - alpha / 2) / sqrt(t))
cat("k,look,fraction,spent,boundary\n")
for (K in 2:5) {
  t <- (1:K) / K
  b <- numeric(K)
  for (k in 1:K) {
    inc <- spend(t[k]) - if (k > 1) spend(t[k - 1]) else 0
    S <- outer(t[1:k], t[1:k], function(a, c) sqrt(pmin(a, c) / pmax(a, c)))
    cross <- function(c) {
      if (k == 1) return(2 * pnorm(-c))
      inside <- function(upper) {
        lo <- c(-b[1:(k - 1)], upper[1])
        hi <- c(b[1:(k - 1)], upper[2])
        pmvnorm(lower = lo, upper = hi, sigma = S, algorithm = Miwa(steps = 4096))[1]
      }
      # stay inside the earlier boundaries and leave (-c, c) at look k
      inside(c(c, Inf)) + inside(c(-Inf, -c))
    }
    b[k] <- uniroot(function(c) cross(c) - inc, c(0.5, 12), tol = 1e-10)$root
    cat(sprintf("%d,%d,%.6f,%.8f,%.6f\n", K, k, t[k], spend(t[k]), b[k]))
  }
}
