#include "record/sha256.hpp"

#include <openssl/evp.h>

#include <fstream>
#include <memory>
#include <stdexcept>

namespace loadtrim::record {

namespace {
struct Ctx {
  EVP_MD_CTX* p = EVP_MD_CTX_new();
  ~Ctx() { EVP_MD_CTX_free(p); }
};
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

std::string sha256_hex(std::string_view data) {
  Ctx c;
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned n = 0;
  if (!c.p || EVP_DigestInit_ex(c.p, EVP_sha256(), nullptr) != 1 ||
      EVP_DigestUpdate(c.p, data.data(), data.size()) != 1 || EVP_DigestFinal_ex(c.p, md, &n) != 1)
    throw std::runtime_error("SHA-256 failed (OpenSSL)");
  return hex(md, n);
}

std::string sha256_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return "";
  Ctx c;
  if (!c.p || EVP_DigestInit_ex(c.p, EVP_sha256(), nullptr) != 1)
    throw std::runtime_error("SHA-256 failed (OpenSSL)");
  char buf[65536];
  while (in) {
    in.read(buf, sizeof buf);
    if (in.gcount() > 0) EVP_DigestUpdate(c.p, buf, static_cast<std::size_t>(in.gcount()));
  }
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned n = 0;
  EVP_DigestFinal_ex(c.p, md, &n);
  return hex(md, n);
}

}  // namespace loadtrim::record
