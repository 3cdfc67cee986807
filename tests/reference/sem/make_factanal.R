# Reference fixture: one-factor ML factor analysis by base R's stats::factanal on two classic
# published matrices from R's `datasets` package. For one factor, ML exploratory factor analysis
# and the one-factor ML CFA are the same model, so standardized loadings, uniquenesses and the
# minimised discrepancy ("objective") must agree. factanal's STATISTIC carries Bartlett's
# correction (n - 1 - (2p + 5)/6 - 2k/3) * objective; we store both.
# Run: Rscript make_factanal.R > factanal.json
num <- function(x) paste0("[", paste(formatC(x, digits = 15, format = "g"), collapse = ", "), "]")
mat <- function(m) paste0("[", paste(apply(m, 1, num), collapse = ", "), "]")
str <- function(x) paste0("[", paste0('"', x, '"', collapse = ", "), "]")
one <- function(name, cov, n) {
  # Tight optimiser tolerances so the reference is accurate well beyond the 1e-4 we test.
  f <- factanal(factors = 1, covmat = cov, n.obs = n,
                control = list(opt = list(factr = 1, pgtol = 0)))
  l <- f$loadings[, 1]
  if (sum(l) < 0) l <- -l
  paste0('"', name, '": {"variables": ', str(colnames(cov)), ', "n": ', n,
         ', "cov": ', mat(cov), ', "loadings": ', num(l), ', "uniquenesses": ',
         num(f$uniquenesses), ', "objective": ', formatC(f$criteria["objective"], digits = 15),
         ', "statistic_bartlett": ', formatC(f$STATISTIC, digits = 15), ', "dof": ', f$dof,
         ', "p_value": ', formatC(f$PVAL, digits = 15), '}')
}
h <- Harman74.cor$cov[5:9, 5:9]  # the five verbal tests: a one-factor subset
cat("{\n", '"generator": "make_factanal.R", "r_version": "', R.version.string, '", ',
    '"stats_version": "', as.character(packageVersion("stats")), '",\n',
    one("ability_cov", ability.cov$cov, ability.cov$n.obs), ",\n",
    one("harman74_verbal", h, Harman74.cor$n.obs), "\n}\n", sep = "")
