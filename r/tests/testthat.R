library(testthat)
library(morbus)

test_check("morbus")
