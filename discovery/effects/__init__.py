"""From diagram to decisions: control sets and effect ranges.

:func:`control_sets` says, for a treatment and an outcome, whether the effect can be estimated
by adjustment in every diagram of the class a search found, which control sets are valid
(canonical, optimal, minimal), and checks a planned set, giving the path it leaves open or the
forbidden variable it contains. :func:`effect_range` lists the effects the data allow, one per
possible parent set of the treatment, when the diagram is only known up to its class.
:func:`estimate_effect` estimates the effect with a confidence interval for a chosen set.

Every answer is valid only if the diagram class is right (and, for the estimates, the effects
are linear); it is a hypothesis to weigh with study design and expert judgement.
"""

from ._graph import ControlSetError
from ._adjustment import CONTROL_CAUTIONS, MINIMAL_BOUND, ControlSets, Verdict, control_sets
from ._effect_range import (Effect, EffectEstimate, EffectRange, draw_effect_range,
                            effect_range, estimate_effect)

__all__ = ["control_sets", "ControlSets", "Verdict", "ControlSetError", "MINIMAL_BOUND",
           "CONTROL_CAUTIONS", "effect_range", "EffectRange", "Effect", "estimate_effect",
           "EffectEstimate", "draw_effect_range"]
