"""Qt-free state of the window's pages: the widgets subscribe to it and write back through it."""
