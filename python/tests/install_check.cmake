# `cmake --install` puts a package that imports and solves: install into a scratch prefix,
# then import it from there alone (not from the build tree).
file(REMOVE_RECURSE ${PREFIX})
execute_process(COMMAND ${CMAKE_COMMAND} --install ${BUILD_DIR} --prefix ${PREFIX} RESULT_VARIABLE rc OUTPUT_QUIET)
if(rc)
  message(FATAL_ERROR "cmake --install failed (${rc})")
endif()
set(ENV{PYTHONPATH} ${PREFIX}/${PACKAGE_DIR})
execute_process(COMMAND ${PYTHON} -c
  "import stillpoint, os; assert stillpoint.__file__.startswith(os.environ['PYTHONPATH']), stillpoint.__file__; \
s = stillpoint.solve(system={'name': 'H', 'kind': 'atom', 'element': 'H', 'xc': ['lda_x'], 'spin': 'polarized'}); \
print(s.energy['total'])"
  WORKING_DIRECTORY ${PREFIX} RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
if(rc)
  message(FATAL_ERROR "the installed package does not import from ${PREFIX}/${PACKAGE_DIR}:\n${out}\n${err}")
endif()
message(STATUS "installed package solved H: ${out}")
file(REMOVE_RECURSE ${PREFIX})
