# Regenerates asah.csv and asah_reference.json from R's pROC (Debian
# r-cran-proc). Not run in CI: Rscript asah_reference.R
library(pROC)
data(aSAH)
write.csv(aSAH[, c("outcome", "s100b", "ndka")], "asah.csv", row.names = FALSE)
r1 <- roc(aSAH$outcome, aSAH$s100b, levels = c("Good", "Poor"), direction = "<", quiet = TRUE)
r2 <- roc(aSAH$outcome, aSAH$ndka, levels = c("Good", "Poor"), direction = "<", quiet = TRUE)
c1 <- ci.auc(r1, method = "delong")
c2 <- ci.auc(r2, method = "delong")
t <- roc.test(r1, r2, method = "delong", paired = TRUE)
f <- function(x) formatC(as.numeric(x), digits = 15, format = "g")
cat(sprintf('{
  "tool": "R pROC %s (%s)",
  "calls": ["roc(aSAH$outcome, aSAH$s100b, levels=c(\\"Good\\",\\"Poor\\"), direction=\\"<\\")", "ci.auc(r1, method=\\"delong\\")", "the same for ndka", "roc.test(r1, r2, method=\\"delong\\", paired=TRUE)"],
  "n": %d, "n_positive": %d,
  "s100b": {"auc": %s, "ci95": [%s, %s]},
  "ndka": {"auc": %s, "ci95": [%s, %s]},
  "paired_delong": {"z": %s, "p_value": %s}
}
', packageVersion("pROC"), R.version.string, nrow(aSAH), sum(aSAH$outcome == "Poor"),
  f(c1[2]), f(c1[1]), f(c1[3]), f(c2[2]), f(c2[1]), f(c2[3]), f(t$statistic), f(t$p.value)),
  file = "asah_reference.json")
