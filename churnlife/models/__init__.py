"""Churn hazard models fitted on the counts table (cohort × tenure): continuous-time families,
piecewise-constant and spline hazards, discrete renewal models, never-churn mixtures and covariate
forms, with fit checks and extrapolation. Every fitted model satisfies
``churnlife.models.base.FittedSurvival``."""
