"""Validate: how well a candidate predicts soils it has not seen.

``splitters`` holds the cross-validation schemes (scikit-learn splitter protocol),
``crossval`` the out-of-fold predictions with intervals from training folds only,
``skill`` the error and interval scores, ``candidates`` the candidate grid (forms x
estimators x directions x interval methods) and its ranking, ``runfolder`` the run folder
it writes. Never imports publish, apply or report.
"""
