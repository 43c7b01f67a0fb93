#!/usr/bin/Rscript
# Writes sleep.csv: the paired differences (drug 2 minus drug 1, extra hours
# of sleep, 10 patients) of R's bundled `sleep` data (Cushny & Peebles 1905,
# as analysed by Student 1908), from Debian's r-base-core datasets package.
# It has one zero difference and tied |d|, so it exercises both rules.
# Run first: /usr/bin/Rscript make_sleep.R
d <- with(datasets::sleep, extra[group == 2] - extra[group == 1])
write.csv(data.frame(pair = seq_along(d), diff = sprintf("%.17g", d)),
          "sleep.csv", row.names = FALSE, quote = FALSE)
