"""Judging a model.

What lives here: validation on held-out data with residual diagnostics and
verdicts (:mod:`~ident.assess.diagnostics`, with the residual tests in
:mod:`~ident.assess.residuals`, the frequency-response comparison in
:mod:`~ident.assess.spectral` and the order advice and fit gap in
:mod:`~ident.assess.advice`), the mode table in physical units
with plausibility flags (:mod:`~ident.assess.modes`), engineer-stated
expectations and their checks (:mod:`~ident.assess.expectations`) and the
comparison of a model with a baseline (:mod:`~ident.assess.drift`) and of
the units of a fleet with each other (:mod:`~ident.assess.fleet`). Modules
here may import each other (without loops), :mod:`ident.lti` and the base
modules (:mod:`ident.errors`, :mod:`ident.choices`, :mod:`ident._validate`,
:mod:`ident._json`), never :mod:`ident.estimate` or anything above it. This
``__init__`` imports nothing; import the names from their modules (``from
ident.assess.modes import mode_table``).
"""
