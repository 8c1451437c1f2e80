// Reading a record folder without ever leaving it. Every path a folder's own records name (a "files" entry, a
// trace, the seal's list) is untrusted input: it must be relative, made only of plain components (no "", ".",
// ".." or backslash), and it is opened component by component from the folder's directory descriptor with
// O_NOFOLLOW, so neither "../../etc/hostname" nor a symbolic link placed in the folder can make loadtrim open
// a file outside it. Only regular files are opened: a FIFO, a device or a socket is refused after an
// lstat-style check, before any open(2) (opening a FIFO could block, or be noticed by whoever holds its other
// end).
//
// Never throws; every failure is a status with a sentence naming the path.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

namespace loadtrim::record {

// Whether `rel` may name a file inside a folder; when not, `why` says which rule it breaks.
bool is_safe_relative_path(const std::string& rel, std::string* why = nullptr);

enum class InsideStatus {
  ok,
  missing,  // no such file (or a directory on the way is missing)
  unsafe,   // refused without opening: unsafe path, a symbolic link, or not a regular file
  io_error  // the folder or the file could not be read
};

struct InsideFile {
  InsideStatus status = InsideStatus::io_error;
  std::string error;  // when status != ok: a sentence naming the path
  std::string content;
};

// Reads folder/rel under the rules above.
InsideFile read_inside(const std::string& folder, const std::string& rel);

struct InsideHash {
  InsideStatus status = InsideStatus::io_error;
  std::string error;
  std::string sha256;  // lower-case hex
  std::uint64_t bytes = 0;
};
InsideHash hash_inside(const std::string& folder, const std::string& rel);
// fsync(2) of folder/rel (opened under the rules above), so that what a seal hashes is what a power loss
// leaves. ok, or a status with a sentence naming the file.
InsideFile sync_inside(const std::string& folder, const std::string& rel);

struct FolderListing {
  bool ok = false;
  std::string error;               // names the offending entry (a symbolic link, a FIFO, ...) when !ok
  std::string offending;           // that entry's relative path, when there is one
  std::vector<std::string> files;  // every regular file, relative, '/'-separated, sorted bytewise
};
// Lists every regular file under `folder` (recursively) without following links. A symbolic link or any other
// non-regular, non-directory entry anywhere in the folder makes the listing fail, naming it.
FolderListing list_inside(const std::string& folder);

}  // namespace loadtrim::record
