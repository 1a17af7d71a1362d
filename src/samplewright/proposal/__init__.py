"""`samplewright propose`: a search of designs screened by closed-form anticipated variances, then rehearsed."""
