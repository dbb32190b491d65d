"""Reading layouts: GDSII/OASIS files, hierarchy queries, reads isolated in a child process."""
