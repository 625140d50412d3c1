# Installs the built project into a scratch prefix, configures and builds the
# consumer project against it, and runs it. Invoked by ctest (package.install).
# Inputs: BUILD_DIR, SOURCE_DIR, WORK_DIR, GENERATOR, CXX.
file(REMOVE_RECURSE "${WORK_DIR}")
execute_process(COMMAND ${CMAKE_COMMAND} --install "${BUILD_DIR}" --prefix "${WORK_DIR}/prefix"
                RESULT_VARIABLE rc OUTPUT_QUIET)
if(NOT rc EQUAL 0)
  message(FATAL_ERROR "cmake --install failed (${rc})")
endif()
execute_process(COMMAND ${CMAKE_COMMAND} -S "${SOURCE_DIR}/tests/package/consumer"
                        -B "${WORK_DIR}/consumer" -G "${GENERATOR}"
                        -DCMAKE_CXX_COMPILER=${CXX}
                        -DCMAKE_PREFIX_PATH=${WORK_DIR}/prefix
                RESULT_VARIABLE rc)
if(NOT rc EQUAL 0)
  message(FATAL_ERROR "configuring the consumer against the installed package failed")
endif()
execute_process(COMMAND ${CMAKE_COMMAND} --build "${WORK_DIR}/consumer" RESULT_VARIABLE rc)
if(NOT rc EQUAL 0)
  message(FATAL_ERROR "building the consumer failed")
endif()
execute_process(COMMAND "${WORK_DIR}/consumer/consumer" RESULT_VARIABLE rc OUTPUT_VARIABLE out)
if(NOT rc EQUAL 0)
  message(FATAL_ERROR "the consumer failed (${rc})")
endif()
# sigma2 after 0.5, -1, 0.25 from the unconditional 0.1/(1-0.9) = 1:
# 0.1 + 0.1*0.5^2 + 0.8*1 = 0.925; 0.1 + 0.1*1 + 0.8*0.925 = 0.94;
# next = 0.1 + 0.1*0.0625 + 0.8*0.94 = 0.85825
string(STRIP "${out}" out)
if(NOT out MATCHES "^0\\.8582")
  message(FATAL_ERROR "unexpected consumer output '${out}' (expected 0.85825)")
endif()
message(STATUS "installed package works: ${out}")
