#include "record/sha256.hpp"

#include <openssl/evp.h>

#include <fstream>
#include <memory>
#include <stdexcept>
#include <vector>

namespace loadtrim::record {

namespace {
std::string hex(const unsigned char* d, unsigned n) {
  static const char* k = "0123456789abcdef";
  std::string s;
  for (unsigned i = 0; i < n; ++i) {
    s += k[d[i] >> 4];
    s += k[d[i] & 15];
  }
  return s;
}
}  // namespace

struct Sha256::Impl {
  EVP_MD_CTX* p = EVP_MD_CTX_new();
  ~Impl() { EVP_MD_CTX_free(p); }
};

Sha256::Sha256() : impl_(std::make_unique<Impl>()) {
  if (!impl_->p || EVP_DigestInit_ex(impl_->p, EVP_sha256(), nullptr) != 1)
    throw std::runtime_error("SHA-256 failed (OpenSSL)");
}

Sha256::~Sha256() = default;

void Sha256::update(const void* data, std::size_t n) {
  if (n > 0 && EVP_DigestUpdate(impl_->p, data, n) != 1) throw std::runtime_error("SHA-256 failed (OpenSSL)");
}

std::string Sha256::hex() {
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned n = 0;
  if (EVP_DigestFinal_ex(impl_->p, md, &n) != 1) throw std::runtime_error("SHA-256 failed (OpenSSL)");
  return record::hex(md, n);
}

std::string sha256_hex(std::string_view data) {
  Sha256 h;
  h.update(data.data(), data.size());
  return h.hex();
}

std::string sha256_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return "";
  Sha256 h;
  std::vector<char> buf(kHashChunkBytes);
  while (in) {
    in.read(buf.data(), static_cast<std::streamsize>(buf.size()));
    if (in.gcount() > 0) h.update(buf.data(), static_cast<std::size_t>(in.gcount()));
  }
  if (in.bad()) return "";
  return h.hex();
}

}  // namespace loadtrim::record
