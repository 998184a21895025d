"""Stage 3: the models a pair can be fitted with, behind one interface.

A sampled model (``normal``, ``student_t``) is a module with ``NAME``, ``PARAMETERS``
(in the data's units), ``inputs_for(pair)`` (the per-pair values fed to one compiled
model) and ``build_model(inputs)`` (the PyMC model of one structure); the fit stage
compiles each structure once and maps the standardised draws back to the data's units. The normal and
Student-t densities are also written by hand for numba (``compiled``), so their compiled code stays on
disk across processes; the PyMC models remain their reference and the partial model's only form.
The rank model has a one-dimensional posterior computed by quadrature
(``rank.rank_posterior``) and needs no sampler. The exact reference of the normal
model is ``normal_reference.reference_posterior``, under the priors the sampler used (it reduces to
``reportgen.exact``, Jeffreys' closed form, under Jeffreys' priors).
"""

from __future__ import annotations

from types import ModuleType

from reportgen.models import normal, partial, student_t
from reportgen.models.base import ModelInputs, Standardisation, to_data_units

SAMPLED: dict[str, ModuleType] = {normal.NAME: normal, student_t.NAME: student_t, partial.NAME: partial}

__all__ = ["SAMPLED", "ModelInputs", "Standardisation", "normal", "student_t", "to_data_units"]
