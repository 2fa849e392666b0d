"""Model objects and pure linear-systems algebra.

What lives here: the model dataclasses (:mod:`~ident.lti.models`), conversions
between state space and transfer functions and to and from scipy.signal
(:mod:`~ident.lti.convert`), realisations (:mod:`~ident.lti.realization`),
discretisation (:mod:`~ident.lti.discretize`), simulation
(:mod:`~ident.lti.simulate`), analysis such as zeros, gains and responses
(:mod:`~ident.lti.analysis`), the orthogonal deflations behind zeros, gains
and transfer-function polynomials (:mod:`~ident.lti.zeros`), the parameter
covariance of a state-space model and its propagation to poles, gains and the
frequency response (:mod:`~ident.lti.covariance`), input delays as states
(:mod:`~ident.lti.input_delay`), balanced truncation
(:mod:`~ident.lti.truncation`) and the small dense helpers numpy lacks
(:mod:`~ident.lti._linalg`). Nothing here knows
about data, estimation or judging a model: modules in this package import only
each other (without loops), numpy and scipy, and the base modules
:mod:`ident.errors`, :mod:`ident.choices`, :mod:`ident._validate` and
:mod:`ident._json`. This ``__init__`` imports nothing, so importing a
sub-module loads only what that module needs; import the names from their
modules (``from ident.lti.models import StateSpaceModel``).
"""
