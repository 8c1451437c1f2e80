# Runs the CLI on a bad target file and checks: non-zero exit code 2, the file named, the key named, the range given.
execute_process(COMMAND ${EXE} demo --target ${DATA}/bad-target.toml --truth ${SRC}/samples/truths/demo-hatchback.toml
                RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
if(NOT rc EQUAL 2)
  message(FATAL_ERROR "expected exit code 2, got ${rc}\n${out}\n${err}")
endif()
foreach(needle "bad-target.toml: error: vehicle.test_mass_kg (line 5): is -1500, allowed 300 to 20000 kg"
               "target.f2_n_per_kmh2 (line 12): is -0.03, must be positive" "refused: nothing was started")
  string(FIND "${err}" "${needle}" pos)
  if(pos EQUAL -1)
    message(FATAL_ERROR "missing '${needle}' in:\n${err}")
  endif()
endforeach()
execute_process(COMMAND ${EXE} demo --target ${DATA}/does-not-exist.toml RESULT_VARIABLE rc2 ERROR_VARIABLE err2)
if(NOT rc2 EQUAL 2 OR NOT err2 MATCHES "does-not-exist.toml: error: cannot open the file")
  message(FATAL_ERROR "missing file: rc ${rc2}\n${err2}")
endif()
