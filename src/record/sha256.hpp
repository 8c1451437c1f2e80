// SHA-256 through OpenSSL libcrypto (EVP), as lower-case hex.
#pragma once

#include <cstddef>
#include <memory>
#include <string>
#include <string_view>

namespace loadtrim::record {

std::string sha256_hex(std::string_view data);
// Of a whole file, read in chunks of kHashChunkBytes (never the whole file in memory); empty string when the
// file cannot be read.
std::string sha256_file(const std::string& path);

// How much of a file is read at a time while it is hashed: the memory a hash takes, whatever the file's size
// (common practice, no source).
inline constexpr std::size_t kHashChunkBytes = std::size_t{1} << 20;

// A hash fed in pieces (OpenSSL EVP_DigestUpdate per piece): the same digest as sha256_hex of the pieces
// joined. Throws std::runtime_error only when OpenSSL fails.
class Sha256 {
 public:
  Sha256();
  ~Sha256();
  Sha256(const Sha256&) = delete;
  Sha256& operator=(const Sha256&) = delete;
  void update(const void* data, std::size_t n);
  // Lower-case hex; the hash takes no more data afterwards.
  std::string hex();

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace loadtrim::record
