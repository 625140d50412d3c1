// aftershock command-line entry point; see src/app/cli.h for the commands.
#include "app/cli.h"

int main(int argc, char** argv) { return aftershock::app::Main(argc, argv); }
