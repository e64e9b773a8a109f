// glob.cc: anchored '*' / '?' matching. See glob.h.
//
// Design note. The matcher walks pattern and name together. On '*' it
// remembers the star and the name position it was tried at; on a mismatch it
// returns to the last star and lets it absorb one more character. Only the
// last star needs remembering: once a later star is reached, any extension of
// an earlier star's run can be matched by the later star instead. Positions
// advance by whole UTF-8 code points, so '?' never splits a character.
#include "config/glob.h"

#include <cstddef>

namespace plumbline::config {

namespace {

bool is_continuation(char c) {
  return (static_cast<unsigned char>(c) & 0xC0) == 0x80;
}

// One past the character that starts at `i`.
std::size_t next_char(std::string_view s, std::size_t i) {
  ++i;
  while (i < s.size() && is_continuation(s[i]))
    ++i;
  return i;
}

}  // namespace

bool glob_match(std::string_view pattern, std::string_view name) {
  std::size_t p = 0, n = 0;
  std::size_t star = std::string_view::npos, star_name = 0;
  while (n < name.size()) {
    if (p < pattern.size() && pattern[p] == '*') {
      star = p++;
      star_name = n;
    } else if (p < pattern.size() && pattern[p] == '?') {
      ++p;
      n = next_char(name, n);
    } else if (p < pattern.size() && pattern[p] == name[n]) {
      ++p;
      ++n;
    } else if (star != std::string_view::npos) {
      p = star + 1;
      star_name = next_char(name, star_name);
      n = star_name;
    } else {
      return false;
    }
  }
  while (p < pattern.size() && pattern[p] == '*')
    ++p;
  return p == pattern.size();
}

bool glob_matches_everything(std::string_view pattern) {
  if (pattern.empty()) return false;
  for (char c : pattern)
    if (c != '*') return false;
  return true;
}

}  // namespace plumbline::config
