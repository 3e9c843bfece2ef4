// The command line: parses and checks every option before any input is read,
// then hands over to the stage that does the work.
#pragma once

namespace tamis {

// Runs one tamis command; returns the process exit code (see errors.hpp).
int run_command_line(int argc, char** argv);

}  // namespace tamis
