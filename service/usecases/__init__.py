"""What berth does for its callers, one module per resource: catalogs, quotes, sweeps, fleet plans and
API keys, plus what they share (loading and validating documents, idempotency, the sweep's chunk
pool). Use cases speak the contract's models, call the domain and own their storage transactions;
they never import the HTTP layer or the command line."""
