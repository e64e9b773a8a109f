// asio.h: the one way the daemon includes Boost.Asio and Boost.Beast.
//
// Purpose. Boost 1.74's Asio, compiled by g++ 12 in C++20 mode, switches its
// coroutine support on and then uses std::exchange in awaitable.hpp without
// including <utility>. Including <utility> before any Boost header avoids the
// error. Every daemon file that uses Asio or Beast includes this header first,
// before any other Boost header, so the order never depends on include order
// elsewhere.
//
// Thread-safety: a header of includes; nothing of its own.
#pragma once

// clang-format off
#include <utility>  // must precede every Asio header (see above)

#include <boost/asio.hpp>
#include <boost/asio/strand.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
// clang-format on
