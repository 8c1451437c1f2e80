# Bad bench options are refused before anything runs: exit 2 and a message naming the option and its range.
function(expect_refused needle)
  execute_process(COMMAND ${EXE} bench ${ARGN} RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
  if(NOT rc EQUAL 2)
    message(FATAL_ERROR "bench ${ARGN}: expected exit code 2, got ${rc}\n${out}\n${err}")
  endif()
  string(FIND "${out}${err}" "${needle}" pos)
  if(pos EQUAL -1)
    message(FATAL_ERROR "bench ${ARGN}: missing '${needle}' in:\n${out}\n${err}")
  endif()
endfunction()
expect_refused("--truths: gentle not in {typical,harsh}" --truths gentle)
expect_refused("--hold-bias-sd-n: is 99, allowed 0 to 50 N" --hold-bias-sd-n 99)
expect_refused("--speed-noise-kmh: is -0.1, allowed 0 to 1 km/h" --speed-noise-kmh -0.1)
expect_refused("--warm-up-tau-min-s: is 3000 s, above --warm-up-tau-max-s (2000 s); allowed 60 s to the maximum"
               --warm-up-tau-min-s 3000 --warm-up-tau-max-s 2000)
expect_refused("--cold-excess-min: is 1.2, above --cold-excess-max (1); allowed 0 to the maximum"
               --truths harsh --cold-excess-min 1.2)
expect_refused("--inertia-error-sd-pct: is lots, allowed 0 to 5 %" --inertia-error-sd-pct lots)
