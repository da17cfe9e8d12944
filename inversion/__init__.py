"""sondage.inversion: parameters, priors, likelihoods, samplers and result files."""
