#include "daemon/tls.h"

#include <string>

namespace plumbline {

StatusOr<std::shared_ptr<TlsContext>> MakeServerTlsContext(const TlsOptions& options,
                                                           std::string_view listener) {
  if (!options.enabled()) return std::shared_ptr<TlsContext>();
  auto context = std::make_shared<TlsContext>(TlsContext::tls_server);
  context->set_options(TlsContext::default_workarounds | TlsContext::no_sslv2 |
                       TlsContext::no_sslv3 | TlsContext::no_tlsv1 |
                       TlsContext::no_tlsv1_1 | TlsContext::single_dh_use);
  const std::string where = std::string(listener) + " tls: ";
  boost::system::error_code error;
  context->use_certificate_chain_file(options.certificate_file, error);
  if (error) {
    return Status::InvalidArgument(where + "cannot use certificate_file '" +
                                   options.certificate_file + "': " + error.message());
  }
  context->use_private_key_file(options.key_file, TlsContext::pem, error);
  if (error) {
    return Status::InvalidArgument(where + "cannot use key_file '" + options.key_file +
                                   "': " + error.message());
  }
  return context;
}

}  // namespace plumbline
