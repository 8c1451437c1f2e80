# package.install: builds the Debian package with cpack, unpacks it into a scratch root with dpkg-deb -x, and runs the
# unpacked binaries from there: loadtrim --version, loadtrim-sim --help (both load their shared libraries), then the
# demo with the in-process simulated controller (the fastest form, about 2 s), on the unpacked profiles, cell file and
# samples (the tool must find them beside itself, not in the source tree) and a scratch data root.
# Arguments: -DCPACK=<cpack> -DBIN=<build dir> -DWORK=<scratch folder> -DVERSION=<project version>.
find_program(DPKG_DEB dpkg-deb)
if(NOT DPKG_DEB)
  message("SKIPPED: dpkg-deb is not installed (Debian package dpkg)")
  return()
endif()

function(run what)
  execute_process(COMMAND ${ARGN} RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
  if(NOT rc EQUAL 0)
    message(FATAL_ERROR "${what}: exit ${rc}\n${ARGN}\n--- stdout\n${out}\n--- stderr\n${err}")
  endif()
  set(out "${out}" PARENT_SCOPE)
endfunction()

file(REMOVE_RECURSE "${WORK}")
file(MAKE_DIRECTORY "${WORK}/pkg" "${WORK}/root" "${WORK}/data")
file(REAL_PATH "${WORK}" WORK)

run("cpack" ${CPACK} -G DEB --config ${BIN}/CPackConfig.cmake -B ${WORK}/pkg)
file(GLOB debs "${WORK}/pkg/*.deb")
list(LENGTH debs n)
if(NOT n EQUAL 1)
  message(FATAL_ERROR "expected one .deb in ${WORK}/pkg, found ${n}: ${debs}")
endif()

# The control fields: name, version, and dependencies on the shared libraries the binaries use.
run("dpkg-deb -f" ${DPKG_DEB} -f ${debs} Package Version Depends)
foreach(re "Package: loadtrim\n" "Version: ${VERSION}" "Depends:[^\n]*libc6" "Depends:[^\n]*libmodbus"
           "Depends:[^\n]*libssl")
  if(NOT out MATCHES "${re}")
    message(FATAL_ERROR "control fields do not match '${re}':\n${out}")
  endif()
endforeach()

run("dpkg-deb -x" ${DPKG_DEB} -x ${debs} ${WORK}/root)
set(prefix "${WORK}/root/usr")
foreach(f bin/loadtrim bin/loadtrim-sim share/loadtrim/config/profiles/wltp-iterative.toml
          share/loadtrim/config/checks/cfr1066.toml share/loadtrim/config/cells/sim-tcp.toml
          share/loadtrim/samples/targets/demo-hatchback.toml share/loadtrim/samples/truths/demo-hatchback.toml
          share/loadtrim/samples/data/epa_test_car_roadload_MY2016_2019.csv share/doc/loadtrim/README.md
          share/doc/loadtrim/records.md)
  if(NOT EXISTS "${prefix}/${f}")
    message(FATAL_ERROR "the package does not install ${f}")
  endif()
endforeach()

# The unpacked tool, never the source tree's data: LOADTRIM_HOME unset, the lab data root a scratch folder.
set(env ${CMAKE_COMMAND} -E env --unset=LOADTRIM_HOME LOADTRIM_DATA_DIR=${WORK}/data)
run("--version" ${env} ${prefix}/bin/loadtrim --version)
if(NOT out MATCHES "^loadtrim ${VERSION} build ")
  message(FATAL_ERROR "unexpected --version output: ${out}")
endif()
run("demo --help" ${env} ${prefix}/bin/loadtrim demo --help)
string(FIND "${out}" "${prefix}/share/loadtrim/samples/targets/demo-hatchback.toml" pos)
if(pos EQUAL -1)
  message(FATAL_ERROR "the unpacked tool does not take its samples from ${prefix}/share/loadtrim:\n${out}")
endif()
run("loadtrim-sim --help" ${env} ${prefix}/bin/loadtrim-sim --help)
if(NOT out MATCHES "loadtrim-sim: simulated")
  message(FATAL_ERROR "unexpected loadtrim-sim --help output: ${out}")
endif()
run("demo" ${env} ${prefix}/bin/loadtrim demo --in-process)
if(NOT out MATCHES "accepted: [^\n]* after [0-9]+ coast-downs")
  message(FATAL_ERROR "the demo's output names no accepted result:\n${out}")
endif()
file(GLOB sessions "${WORK}/data/sessions/*")
if(NOT sessions)
  message(FATAL_ERROR "no session folder under the scratch data root ${WORK}/data/sessions")
endif()
message("package.install: ${debs} installs, runs --version and an accepted demo")
