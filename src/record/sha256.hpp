// SHA-256 through OpenSSL libcrypto (EVP), as lower-case hex.
#pragma once

#include <string>
#include <string_view>

namespace loadtrim::record {

std::string sha256_hex(std::string_view data);
// Of a whole file; empty string when the file cannot be read.
std::string sha256_file(const std::string& path);

}  // namespace loadtrim::record
