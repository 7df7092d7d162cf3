"""Spearman rank correlation by SciPy (reference for StackBuild's Uncertainty.Spearman).
Usage: spearman.py A1,A2,... B1,B2,...   prints rho."""
import sys
from scipy.stats import spearmanr

a = [float(v) for v in sys.argv[1].split(",")]
b = [float(v) for v in sys.argv[2].split(",")]
print(repr(float(spearmanr(a, b).statistic)))
