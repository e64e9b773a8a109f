// glob.h: the stream-name patterns of [[group]] match = "...".
//
// Purpose. A pattern selects streams by name: '*' matches any run of
// characters (none included, '/' included, so "larkspur/*" covers every line
// and sensor below it), '?' matches exactly one character, and every other
// character, '[' and '\' among them, matches itself. Matching is over whole
// names (anchored at both ends) and case-sensitive. A "character" is one UTF-8
// code point: '?' consumes a lead byte and its continuation bytes; names that
// are not valid UTF-8 are matched byte by byte where they are not.
//
// Cost. O(|pattern| * |name|) in the worst case, with no recursion and no
// allocation (the classic single-backtrack-point algorithm).
//
// Thread-safety: pure functions.
#pragma once

#include <string_view>

namespace plumbline::config {

// True when `name` matches `pattern` as a whole.
bool glob_match(std::string_view pattern, std::string_view name);

// True when the pattern consists of '*' only: it matches every name.
bool glob_matches_everything(std::string_view pattern);

}  // namespace plumbline::config
