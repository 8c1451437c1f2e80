// The record store on PostgreSQL (Debian's libpq, the C client library), for a lab whose cells share one
// server. The same schema and numbered migrations as the SQLite engine (schema.hpp, in PostgreSQL's dialect),
// the same refusals at open, and every value a bound parameter ($1, $2, ...), never pasted into the SQL.
//
// Every wait has a deadline: the connection is given libpq's connect_timeout (PgTimeouts::connect_timeout_s
// unless the connection string names a shorter one; 0 there, "wait without end", is refused), the session a
// statement_timeout, and each answer is awaited on our monotonic clock for at most statement_timeout plus
// PgTimeouts::answer_margin_ms; past that the connection is closed and the call fails. Messages name the
// server as host:port/dbname, never the password.
#pragma once

#include <memory>
#include <string>

#include "store/store.hpp"

namespace loadtrim::store {

struct PgTimeouts {
  int connect_timeout_s = 10;        // libpq connect_timeout (libpq counts less than 2 s as 2 s)
  int statement_timeout_ms = 30000;  // the server's statement_timeout for this connection
  int answer_margin_ms = 5000;       // past statement_timeout, how long we still wait for the answer
};

// Whether `text` is a libpq connection URI: it starts with postgresql:// or postgres:// (what `--store` takes
// as a server; anything else there is an SQLite file).
bool is_postgresql_uri(const std::string& text);

// The server a connection string names, as host:port/dbname (libpq's defaults written as such when a part is
// not given), for messages; never the user's password. False, with a sentence in `error`, when libpq cannot
// parse it or it sets connect_timeout to wait without end.
bool describe_conninfo(const std::string& conninfo, std::string& server, std::string& error);

// Connects and opens the store in the connection's current schema (the first schema of its search_path that
// exists; a conninfo's `options=-csearch_path=NAME` picks another). Refused (nullptr, a sentence naming the
// server in `error`) when: the server cannot be reached in time or refuses the connection; the schema holds
// tables but no schema_migrations (not a loadtrim store); it holds a schema newer than this tool knows
// (either mode); or, in `use`, no store or an older one ("run loadtrim store migrate"). Opening never
// migrates and changes nothing.
std::unique_ptr<Store> open_postgresql(const std::string& conninfo, OpenMode mode, std::string& error,
                                       const PgTimeouts& timeouts = {});

// The store bench's scratch schemas (`loadtrim store bench --postgresql`, docs/performance.md): creates schema
// `name` on the server, or drops it with everything in it. Only a name loadtrim_bench_ followed by a-z, 0-9 or
// _ is accepted (an identifier cannot be a bound parameter, so nothing else is ever written into the SQL);
// nothing else on the server is touched. False with a sentence naming the server in `error`.
bool pg_bench_schema(const std::string& conninfo, const std::string& name, bool create, std::string& error);
// The connection string with its search_path set to schema `name` (libpq's `options`, added last so that it
// replaces one the string gives), for open_postgresql.
std::string pg_conninfo_with_schema(const std::string& conninfo, const std::string& name);

}  // namespace loadtrim::store
