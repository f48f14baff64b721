"""A twin of a measured part: the behavioural mixer model fitted to a stored run.

Layers, one way: :mod:`.observations` (a run's figures → what the fit may use, or a located
refusal), :mod:`.forward` (the model's figure for one observation: pure), :mod:`.parameters`
(which part parameters a fit may move, their bounds and what constrains each), :mod:`.fit`
(weighted least squares and the Jacobian covariance), :mod:`.partfile` (the fitted part as
a part file that ``--sim`` and ``sim serve`` accept, unconstrained parameters commented).
"""
