// Reading a record folder without ever leaving it. Every path a folder's own records name (a "files" entry, a
// trace, the seal's list) is untrusted input: it must be relative, made only of plain components (no "", ".",
// ".." or backslash), and it is opened component by component from the folder's directory descriptor with
// O_NOFOLLOW, so neither "../../etc/hostname" nor a symbolic link placed in the folder can make loadtrim open
// a file outside it. Only regular files are opened: a FIFO, a device or a socket is refused after an
// lstat-style check, before any open(2) (opening a FIFO could block, or be noticed by whoever holds its other
// end).
//
// A file read whole into memory (read_inside, read_file_whole) is refused above kMaxRecordFileBytes, before
// anything is read: a damaged or planted file of gigabytes is a finding naming the file and the limit, never
// an allocation failure. Hashing (hash_inside) streams the file in chunks (record/sha256.hpp) and has no
// limit.
//
// Never throws; every failure is a status with a sentence naming the path.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace loadtrim::record {

// The largest file of a record folder (or log) read whole into memory: events.jsonl, summary.json,
// result.json, a trace read back for the report, the inputs, the cell log. A session writes a trace of at
// most a few MB per coast-down (1 kHz, the highest controller.sample_rate_hz, is about 50 bytes a sample; a
// 10-minute coast-down at 1 kHz would be 30 MB) and a log of a few MB at most (100 coast-downs, the highest
// limits.max_coastdowns); 256 MiB is about eight times the largest of them (common practice, no source).
inline constexpr std::uint64_t kMaxRecordFileBytes = std::uint64_t{256} << 20;

// Whether `rel` may name a file inside a folder; when not, `why` says which rule it breaks.
bool is_safe_relative_path(const std::string& rel, std::string* why = nullptr);

enum class InsideStatus {
  ok,
  missing,   // no such file (or a directory on the way is missing)
  unsafe,    // refused without opening: unsafe path, a symbolic link, or not a regular file
  io_error,  // the folder or the file could not be read
  too_large  // larger than the limit on a file read whole (kMaxRecordFileBytes unless told); nothing read
};

struct InsideFile {
  InsideStatus status = InsideStatus::io_error;
  std::string error;  // when status != ok: a sentence naming the path
  std::string content;
};

// Reads folder/rel under the rules above; a file larger than max_bytes is too_large, its error naming the
// file, its size and the limit.
InsideFile read_inside(const std::string& folder, const std::string& rel,
                       std::uint64_t max_bytes = kMaxRecordFileBytes);
// Reads the regular file at `path` (a log outside any folder rules: the cell log; links are followed as
// open(2) follows them) whole, under the same limit; status missing, io_error or too_large with a sentence
// naming the path otherwise.
InsideFile read_file_whole(const std::string& path, std::uint64_t max_bytes = kMaxRecordFileBytes);

struct InsideHash {
  InsideStatus status = InsideStatus::io_error;
  std::string error;
  std::string sha256;  // lower-case hex
  std::uint64_t bytes = 0;
};
// SHA-256 of folder/rel, read in chunks of kHashChunkBytes: any size, constant memory.
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
