"""The trendmill coordinator: a gRPC service for fit jobs, models and results.

Start one with :func:`create_server` (in-process, returns ``(server, port)``)
or :func:`serve` (blocks until SIGINT/SIGTERM; what ``trendmill serve`` runs).
The wire contract is ``proto/trendmill/v1``; its generated code ships with the
thin client (``trendmill_client._proto``).
"""

from ._server import SERVICE_NAMES, Server, ServerConfig, create_server, serve

__all__ = ["Server", "ServerConfig", "create_server", "serve", "SERVICE_NAMES"]
