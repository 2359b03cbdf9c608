"""Approximate Bayesian computation: pure functions over any simulator of summary statistics.

Its modules: :mod:`.simulation` (the simulator's interface, one stage's
simulations), :mod:`.seeds`, :mod:`.distance`, :mod:`.weighted` (weighted-sample
statistics), :mod:`.rejection` (with the regression adjustment), :mod:`.smc`,
:mod:`.posterior` (reference table, generations, posterior) and
:mod:`.predictive` (the posterior predictive check).

Nothing here knows the port model. A simulator is a function from parameter
vectors to summary statistics (a :class:`BatchSimulator`: a batch of
parameter rows, one seed and one label per row, in; :class:`Simulated` out);
:func:`pointwise` turns a function of one parameter vector into one, so the
algorithms can be checked on toy models with known posteriors. The port-model
adapter (:mod:`abm.calibration.simulator`) runs the same calls through the
batch executors.

Distance
    Each summary is divided by its scale (by default the median absolute
    deviation of the prior-predictive summaries, so no summary dominates by
    its units), and the distance is Euclidean on the scaled summaries.

Rejection with regression adjustment (Beaumont, Zhang & Balding 2002)
    Draw from the prior, simulate, keep the share ``accept`` of draws closest
    to the observed summaries; the tolerance h is the first rejected distance.
    Epanechnikov weights K = 1 - (d/h)^2 and a weighted least-squares fit
    phi_i = a + (s_i - s_obs)'b on the kept draws (phi: each parameter on its
    prior's transform scale) give adjusted values phi_i* = phi_i - (s_i - s_obs)'b.

ABC-SMC / population Monte Carlo (Toni et al. 2009; Beaumont et al. 2009)
    Generation 0 is rejection: the ``particles`` closest of ``initial_draws``
    prior draws, equally weighted. Generation t sets its tolerance eps_t to
    the ``quantile`` of generation t-1's distances (weighted), proposes by
    resampling generation t-1 by weight and moving the particle with a
    Gaussian kernel whose covariance is twice the weighted covariance of
    generation t-1 (Beaumont et al. 2009, [mem] for the factor 2), keeps
    proposals within eps_t, and weights them
    w_t(i) ~ prior(theta_i) / sum_j w_{t-1}(j) K_t(theta_i | theta_j).
    Proposals go to the simulator in rounds sized from the acceptance rate so
    far, which is what keeps a batch executor busy.

Latent quantities
    A simulator may return quantities the data do not show but its own runs
    know (crossings, in the port model). They ride along with each particle:
    weighted with it (ABC-SMC) or adjusted with the same regression
    (rejection), they are draws from the ABC posterior of those quantities
    given the observed summaries.

Randomness
    One integer seed. The algorithm's own draws in stage t come from
    ``SeedSequence(seed, spawn_key=(1, t))``; simulation i of stage t gets the
    seed ``SeedSequence(seed, spawn_key=(2, t, i)).generate_state(1)[0]``.
    So a calibration replays exactly, and a store that keeps finished
    simulations can resume one.
"""
