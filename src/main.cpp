#include "tamis/cli.hpp"

int main(int argc, char** argv) { return tamis::run_command_line(argc, argv); }
