"""Data preparation and the estimators.

What lives here: experiment records (:mod:`~ident.estimate.data`), offsets,
detrending, decimation and the estimation/validation split
(:mod:`~ident.estimate.preprocess`), bringing channels recorded at several
rates to one grid (:mod:`~ident.estimate.resample`), excitation measures
(:mod:`~ident.estimate.excitation`), the lagged least-squares regression
that ARX and delay estimation share (:mod:`~ident.estimate.regression`), ARX
(:mod:`~ident.estimate.arx`), input-delay estimation
(:mod:`~ident.estimate.delay`), order criteria (:mod:`~ident.estimate.order`),
subspace identification (:mod:`~ident.estimate.subspace`), output-error,
ARMAX and Box-Jenkins models (:mod:`~ident.estimate.polynomial`),
prediction-error refinement of state-space models
(:mod:`~ident.estimate.refine`, with the Gauss-Newton iteration in
:mod:`~ident.estimate.gauss_newton` and the analytic Jacobians in
:mod:`~ident.estimate.sensitivity`), the long-run covariances
(:mod:`~ident.estimate.hac`), parameter to pole uncertainty
(:mod:`~ident.estimate.uncertainty`), closed-loop identification through a
reference (:mod:`~ident.estimate.closed_loop`), the candidates of the search,
their held-out scores and the selection rule
(:mod:`~ident.estimate.candidates`, :mod:`~ident.estimate.scoring`,
:mod:`~ident.estimate.selection`), the continued fit of a held-out record
(:mod:`~ident.estimate.validation`), the top-level identification job
(:mod:`~ident.estimate.identify`), test-signal design
(:mod:`~ident.estimate.signal_design`, with :mod:`~ident.estimate.multisine`
and :mod:`~ident.estimate.slew`) and the analysis of periodic logs
(:mod:`~ident.estimate.periodic`, :mod:`~ident.estimate.periodic_check`). Modules here may import
each other (without loops), :mod:`ident.assess`, :mod:`ident.lti` and the
base modules (:mod:`ident.errors`, :mod:`ident.choices`,
:mod:`ident._validate`, :mod:`ident._json`), never :mod:`ident.io`,
:mod:`ident.plots`, the report, the pipeline or the CLI. This ``__init__``
imports nothing, so ``rigfit fit`` loads only the modules on its path; import
the names from their modules (``from ident.estimate.identify import
identify``).
"""
