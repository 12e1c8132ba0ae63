"""Cross-validation splits that keep patients, and optionally sites, apart.

:func:`tilewright.splits.make.make_splits` (public as ``tw.make_splits``) and the
``tilewright split`` command: patient-level folds stratified by label, or site-preserved folds
(Howard et al. 2021) when a site column is given.
"""
