"""The public language: the pydantic models of what clients send (catalogs, quote requests, sweeps,
fleet plans) and receive (the quote document and the answer models). Both edges, the HTTP layer and
the command line, speak it, and use cases accept it. Requests convert once into the domain
(`to_domain()`)."""
