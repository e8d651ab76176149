"""The test suite of fringe (a package so that its helpers import as ``tests.helpers``)."""
