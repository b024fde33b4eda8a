"""Global progress-curve fitting: rate laws integrated and fitted to every read of a group's wells at once.

* :mod:`.laws`: what the integrators need from a rate law beyond :class:`~vzero.plugins.fit.catalog.Model`
  (dv/dS, apparent Michaelis-Menten constants, implicit closed forms), for the built-ins and any plugin model;
* :mod:`.closed`: closed-form progress curves (Michaelis-Menten family through the Wright omega / Lambert W
  function, Hill and substrate inhibition through their integrated time t(S) solved by Newton) with exact
  parameter sensitivities;
* :mod:`.product`: competitive inhibition by the reaction's product (constant Kp) for any law with a
  half-saturation constant;
* :mod:`.ode`: the numerical route for any rate law: a Dormand-Prince 5(4) integrator batched over wells with
  per-well step control and forward sensitivity equations;
* :mod:`.curve`: one entry point, :func:`~.curve.progress`, that picks the route;
* :mod:`.fit`: the joint fit of a group's curves (shared kinetic parameters, a baseline per well, optional
  activity factors per enzyme lot);
* :mod:`.selwyn`: Selwyn's test of enzyme stability;
* :mod:`.stage`: the ``fit: {method: curves}`` stage.
"""
