"""How far between knots a solved motion may go past a joint's range or speed limit.

The optimizer imposes joint ranges and speed limits at every knot and at every interval
midpoint; between those the cubic q and quadratic qd can overshoot slightly (measured on the
templates: up to 7e-3 rad and 1 %). The constraint report and the controller export use these
same tolerances, so a motion the optimizer calls clean is one the export accepts.
"""
RANGE_TOL = 1e-2  # rad past a joint's range (measured up to 7e-3 rad on the templates)
SPEED_TOL = 0.02  # relative overshoot of a joint's velocity limit
