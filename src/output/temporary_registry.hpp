// Names of temporary output files, kept where a signal handler can reach them
// without allocating: a fixed array of fixed-size slots.
#pragma once

#include <string>

namespace tamis::output_detail {

// Returns the slot that now holds `path`, or -1 when every slot is taken or
// the path is too long (the owner's destructor still removes the file).
int register_temporary(const std::string& path);
void unregister_temporary(int slot);

}  // namespace tamis::output_detail
