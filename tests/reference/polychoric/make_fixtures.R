# Reference fixtures for crates/construe-stats/src/{bvn,polychoric,polyserial}.rs.
# Run from this directory:  Rscript make_fixtures.R
# Writes bvn.json, polychoric.json and polyserial.json with the R and package versions inside.
# Needs only base R plus the mvtnorm and polycor packages (no JSON package: a tiny writer below).

suppressPackageStartupMessages({
  library(mvtnorm)
  library(polycor)
})

# ---- minimal JSON writer: numbers with 17 significant digits, so fixtures round-trip ----------
num <- function(x) {
  if (length(x) == 0) return("[]")
  s <- ifelse(is.na(x), "null",
       ifelse(is.infinite(x), ifelse(x > 0, "\"inf\"", "\"-inf\""), sprintf("%.17g", x)))
  s
}
jnum <- function(x) if (length(x) == 1) num(x) else paste0("[", paste(num(x), collapse = ","), "]")
jvec <- function(x) paste0("[", paste(num(x), collapse = ","), "]")
jstr <- function(x) paste0("\"", gsub("\"", "\\\\\"", x), "\"")
jobj <- function(fields) {
  paste0("{", paste(paste0(jstr(names(fields)), ":", unlist(fields)), collapse = ","), "}")
}
jarr <- function(items) paste0("[\n", paste(unlist(items), collapse = ",\n"), "\n]")

versions <- jobj(list(
  R = jstr(R.version.string),
  mvtnorm = jstr(as.character(packageVersion("mvtnorm"))),
  polycor = jstr(as.character(packageVersion("polycor")))
))

# ---- 1. bivariate normal CDF P(X <= h, Y <= k; rho) ---------------------------------------------
# For 2-D problems pmvnorm's TVPACK algorithm is Genz's deterministic BVND (accurate to about
# 1e-15); Miwa's algorithm is an independent deterministic cross-check recorded beside it.
# Points with an infinite bound or |rho| = 1 are exact limits computed with pnorm.
tv <- function(h, k, r) {
  pmvnorm(lower = c(-Inf, -Inf), upper = c(h, k), corr = matrix(c(1, r, r, 1), 2),
          algorithm = TVPACK(abseps = 1e-12))[1]
}
miwa <- function(h, k, r) {
  pmvnorm(lower = c(-Inf, -Inf), upper = c(h, k), corr = matrix(c(1, r, r, 1), 2),
          algorithm = Miwa(steps = 4096))[1]
}
hs <- c(-7, -4, -2.2, -1, -0.3, 0, 0.4, 1.3, 2.5, 5)
ks <- c(-6, -3.1, -1.7, -0.6, 0, 0.25, 0.9, 1.8, 3, 8)
rhos <- c(-0.999, -0.99, -0.95, -0.925, -0.9, -0.75, -0.5, -0.2, 0, 0.1, 0.3, 0.6, 0.8, 0.92,
          0.93, 0.95, 0.99, 0.999)
bvn_points <- list()
max_tv_miwa <- 0
for (r in rhos) for (h in hs) for (k in ks) {
  p <- tv(h, k, r)
  m <- miwa(h, k, r)
  max_tv_miwa <- max(max_tv_miwa, abs(p - m))
  bvn_points[[length(bvn_points) + 1]] <- jobj(list(h = num(h), k = num(k), rho = num(r),
                                                    p = num(p), source = jstr("TVPACK")))
}
limit <- function(h, k, r) {
  if (r == 1) return(pnorm(min(h, k)))
  if (r == -1) return(max(0, pnorm(h) + pnorm(k) - 1))
  if (is.infinite(h) && h < 0) return(0)
  if (is.infinite(k) && k < 0) return(0)
  if (is.infinite(h)) return(pnorm(k))
  if (is.infinite(k)) return(pnorm(h))
  stop("not a limit point")
}
for (r in c(-1, 1)) for (h in c(-3, -0.5, 0, 0.7, 2.4)) for (k in c(-2, 0, 0.7, 1.5)) {
  bvn_points[[length(bvn_points) + 1]] <- jobj(list(h = num(h), k = num(k), rho = num(r),
                                                    p = num(limit(h, k, r)),
                                                    source = jstr("exact limit (pnorm)")))
}
for (r in c(-0.99, -0.3, 0, 0.5, 0.99)) for (hk in list(c(Inf, 1.2), c(-0.4, Inf), c(-Inf, 0.3),
                                                          c(2, -Inf), c(Inf, Inf), c(-Inf, -Inf))) {
  bvn_points[[length(bvn_points) + 1]] <- jobj(list(h = num(hk[1]), k = num(hk[2]), rho = num(r),
                                                    p = num(limit(hk[1], hk[2], r)),
                                                    source = jstr("exact limit (pnorm)")))
}
writeLines(paste0("{\n\"versions\":", versions,
                  ",\n\"algorithm\":", jstr("pmvnorm(..., algorithm = TVPACK(abseps = 1e-12))"),
                  ",\n\"max_abs_diff_tvpack_vs_miwa4096\":", num(max_tv_miwa),
                  ",\n\"points\":", jarr(bvn_points), "\n}"), "bvn.json")

# ---- 2. polychoric correlations of contingency tables ------------------------------------------
set.seed(20240607)
cut_table <- function(n, rho, tx, ty) {
  z <- rmvnorm(n, sigma = matrix(c(1, rho, rho, 1), 2))
  x <- cut(z[, 1], c(-Inf, tx, Inf), labels = FALSE)
  y <- cut(z[, 2], c(-Inf, ty, Inf), labels = FALSE)
  table(factor(x, levels = seq_len(length(tx) + 1)), factor(y, levels = seq_len(length(ty) + 1)))
}
tables <- list(
  list(name = "2x2 rho 0.5", tab = cut_table(400, 0.5, 0.2, -0.4)),
  list(name = "3x3 rho -0.8", tab = cut_table(600, -0.8, c(-0.7, 0.6), c(-0.2, 1.1))),
  list(name = "4x4 rho 0.3", tab = cut_table(500, 0.3, c(-1, 0, 0.8), c(-1.2, -0.3, 0.5))),
  list(name = "5x5 rho 0.95", tab = cut_table(1000, 0.95, c(-1.5, -0.6, 0.3, 1.2),
                                               c(-1.3, -0.5, 0.4, 1.4))),
  list(name = "5x7 rho -0.4", tab = cut_table(800, -0.4, c(-1.2, -0.4, 0.4, 1.2),
                                               c(-1.6, -1, -0.4, 0.2, 0.8, 1.5))),
  list(name = "7x7 rho 0.7", tab = cut_table(1500, 0.7, c(-1.8, -1.1, -0.4, 0.3, 0.9, 1.6),
                                              c(-1.5, -0.9, -0.3, 0.2, 0.8, 1.4))),
  list(name = "3x4 with zero cells", tab = as.table(matrix(c(25, 12, 0,
                                                             10, 30, 8,
                                                             3, 14, 22,
                                                             0, 5, 19), 3, 4))),
  list(name = "4x5 with an empty column (merged)",
       tab = as.table(matrix(c(12, 6, 2, 1,
                               9, 14, 7, 2,
                               0, 0, 0, 0,
                               3, 8, 16, 9,
                               1, 2, 9, 18), 4, 5)))
)
poly_cases <- list()
for (t in tables) {
  tab <- t$tab
  storage.mode(tab) <- "double"
  two <- suppressWarnings(polychor(tab, ML = FALSE, std.err = TRUE))
  tight <- suppressWarnings(polychor(tab, ML = FALSE, std.err = TRUE,
                                     control = list(reltol = 1e-14)))
  full <- suppressWarnings(polychor(tab, ML = TRUE, std.err = TRUE,
                                    control = list(reltol = 1e-14, maxit = 50000)))
  # polychor(ML = TRUE) searches with Nelder-Mead, which stalls short of the optimum on tables
  # with many thresholds; polish its solution with BFGS on the same likelihood (polycor's own
  # binBvn cell probabilities), and take the SE from optim's numerical Hessian as polycor does.
  keep <- tab[rowSums(tab) > 0, colSums(tab) > 0, drop = FALSE]
  r <- nrow(keep)
  negll <- function(p) {
    rc <- p[2:r]
    cc <- p[(r + 1):length(p)]
    if (abs(p[1]) >= 1 || any(diff(rc) <= 0) || any(diff(cc) <= 0)) return(Inf)
    -sum(keep * log(polycor:::binBvn(p[1], rc, cc)))
  }
  pol <- optim(c(full$rho, full$row.cuts, full$col.cuts), negll, method = "BFGS",
               hessian = TRUE, control = list(reltol = 1e-15, maxit = 1000))
  rows <- lapply(seq_len(nrow(tab)), function(i) jvec(as.numeric(tab[i, ])))
  poly_cases[[length(poly_cases) + 1]] <- jobj(list(
    name = jstr(t$name),
    table = paste0("[", paste(unlist(rows), collapse = ","), "]"),
    two_step = jobj(list(call = jstr("polychor(tab, ML = FALSE, std.err = TRUE)"),
                         rho = num(two$rho), se = num(sqrt(two$var[1])),
                         row_cuts = jvec(two$row.cuts), col_cuts = jvec(two$col.cuts))),
    two_step_tight = jobj(list(call = jstr("polychor(tab, ML = FALSE, std.err = TRUE, control = list(reltol = 1e-14))"),
                               rho = num(tight$rho), se = num(sqrt(tight$var[1])))),
    full = jobj(list(call = jstr("polychor(tab, ML = TRUE, std.err = TRUE, control = list(reltol = 1e-14, maxit = 50000))"),
                     rho = num(full$rho), se = num(sqrt(full$var[1, 1])),
                     row_cuts = jvec(full$row.cuts), col_cuts = jvec(full$col.cuts))),
    full_polished = jobj(list(call = jstr("optim(<polychor ML = TRUE solution>, <minus log-likelihood from polycor:::binBvn>, method = 'BFGS', hessian = TRUE, control = list(reltol = 1e-15))"),
                              rho = num(pol$par[1]), se = num(sqrt(solve(pol$hessian)[1, 1])),
                              log_likelihood = num(-pol$value),
                              row_cuts = jvec(pol$par[2:r]),
                              col_cuts = jvec(pol$par[(r + 1):length(pol$par)])))
  ))
}
writeLines(paste0("{\n\"versions\":", versions, ",\n\"seed\":20240607",
                  ",\n\"cases\":", jarr(poly_cases), "\n}"), "polychoric.json")

# ---- 3. polyserial correlations of generated data -----------------------------------------------
set.seed(777)
ps_data <- function(n, rho, cuts, mean = 50, sd = 10) {
  z <- rmvnorm(n, sigma = matrix(c(1, rho, rho, 1), 2))
  list(x = round(mean + sd * z[, 1], 6), y = cut(z[, 2], c(-Inf, cuts, Inf), labels = FALSE) - 1)
}
ps_sets <- list(
  list(name = "n 300 rho 0.5, 3 levels", levels = 3, d = ps_data(300, 0.5, c(-0.5, 0.6))),
  list(name = "n 500 rho -0.7, 5 levels, skewed", levels = 5,
       d = ps_data(500, -0.7, c(-0.3, 0.4, 1.0, 1.7))),
  list(name = "n 800 rho 0.9, 4 levels", levels = 4, d = ps_data(800, 0.9, c(-1, 0, 0.9))),
  list(name = "n 250 rho 0.25, 6 levels with level 2 empty (merged)", levels = 6,
       d = within(ps_data(250, 0.25, c(-1.2, -0.6, 0.3, 1.1)), y[y >= 2] <- y[y >= 2] + 1))
)
ps_cases <- list()
for (s in ps_sets) {
  x <- s$d$x
  y <- s$d$y
  two <- suppressWarnings(polyserial(x, y, ML = FALSE, std.err = TRUE))
  tight <- suppressWarnings(polyserial(x, y, ML = FALSE, std.err = TRUE,
                                       control = list(reltol = 1e-14)))
  full <- suppressWarnings(polyserial(x, y, ML = TRUE, std.err = TRUE,
                                      control = list(reltol = 1e-14, maxit = 50000)))
  # Same polishing as above on polyserial's likelihood (x standardised with the n - 1 SD).
  z <- as.vector(scale(x))
  yi <- as.numeric(as.factor(y))
  negll <- function(p) {
    cts <- c(-Inf, p[-1], Inf)
    if (abs(p[1]) >= 1 || any(diff(cts) <= 0)) return(Inf)
    s1 <- sqrt(1 - p[1]^2)
    -sum(log(pnorm((cts[yi + 1] - p[1] * z) / s1) - pnorm((cts[yi] - p[1] * z) / s1)))
  }
  pol <- optim(c(full$rho, full$cuts), negll, method = "BFGS", hessian = TRUE,
               control = list(reltol = 1e-15, maxit = 1000))
  ps_cases[[length(ps_cases) + 1]] <- jobj(list(
    name = jstr(s$name), levels = num(s$levels), x = jvec(x), y = jvec(y),
    two_step = jobj(list(call = jstr("polyserial(x, y, ML = FALSE, std.err = TRUE)"),
                         rho = num(two$rho), se = num(sqrt(two$var[1])), cuts = jvec(two$cuts))),
    two_step_tight = jobj(list(call = jstr("polyserial(x, y, ML = FALSE, std.err = TRUE, control = list(reltol = 1e-14))"),
                               rho = num(tight$rho), se = num(sqrt(tight$var[1])))),
    full = jobj(list(call = jstr("polyserial(x, y, ML = TRUE, std.err = TRUE, control = list(reltol = 1e-14, maxit = 50000))"),
                     rho = num(full$rho), se = num(sqrt(full$var[1, 1])), cuts = jvec(full$cuts))),
    full_polished = jobj(list(call = jstr("optim(<polyserial ML = TRUE solution>, <its minus log-likelihood>, method = 'BFGS', hessian = TRUE, control = list(reltol = 1e-15))"),
                              rho = num(pol$par[1]), se = num(sqrt(solve(pol$hessian)[1, 1])),
                              cuts = jvec(pol$par[-1])))
  ))
}
writeLines(paste0("{\n\"versions\":", versions, ",\n\"seed\":777",
                  ",\n\"cases\":", jarr(ps_cases), "\n}"), "polyserial.json")
