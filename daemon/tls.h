// TLS for the listeners (listeners.tcp.tls, listeners.http.tls): a server
// context made once at start from the configured PEM files, shared by every
// connection of its listener. Only TLS 1.2 and later are offered. The context
// is read-only once made; Asio streams may use it from any thread.
#pragma once

#include <utility>
#include <boost/asio/ssl/context.hpp>
#include <memory>
#include <string_view>

#include "config/service_options.h"
#include "detectors/status.h"

namespace plumbline {

using TlsContext = boost::asio::ssl::context;

// A server context holding the certificate chain and private key that
// `options` name; null when TLS is off. InvalidArgument, naming `listener`
// and the file, when a file cannot be read or parsed, or the key does not
// match the certificate (OpenSSL: "key values mismatch").
StatusOr<std::shared_ptr<TlsContext>> MakeServerTlsContext(const TlsOptions& options,
                                                           std::string_view listener);

}  // namespace plumbline
