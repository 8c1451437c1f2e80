# Install rules (GNUInstallDirs) and the Debian package (CPack, DEB generator).
#   cmake --install build --prefix /opt/loadtrim      # or DESTDIR=/tmp/root cmake --install build
#   cpack --config build/CPackConfig.cmake -B build/package   # build/package/loadtrim_<version>_<arch>.deb
# Layout: bin/loadtrim and bin/loadtrim-sim side by side (the demo starts the simulator from beside the tool);
# share/loadtrim/{config,samples} mirror the source tree's folders, which the tool looks for beside its executable
# (app/main.cpp, data_dir()); the documentation goes to share/doc/loadtrim.

install(TARGETS loadtrim loadtrim-sim RUNTIME DESTINATION ${CMAKE_INSTALL_BINDIR})

set(LOADTRIM_INSTALL_DATA ${CMAKE_INSTALL_DATADIR}/loadtrim)
# Standard profiles, the dyno check profile and the example cell files.
foreach(d profiles checks cells)
  install(DIRECTORY config/${d} DESTINATION ${LOADTRIM_INSTALL_DATA}/config FILES_MATCHING PATTERN "*.toml")
endforeach()
# The invented demo data and the public EPA extract with its provenance.
install(DIRECTORY samples/targets samples/truths DESTINATION ${LOADTRIM_INSTALL_DATA}/samples
        FILES_MATCHING PATTERN "*.toml")
install(FILES samples/data/README.md samples/data/epa_test_car_roadload_MY2016_2019.csv
        DESTINATION ${LOADTRIM_INSTALL_DATA}/samples/data)
# The documentation: README and docs/ (not the generator sources in docs/src).
install(FILES README.md DESTINATION ${CMAKE_INSTALL_DOCDIR})
install(DIRECTORY docs/ DESTINATION ${CMAKE_INSTALL_DOCDIR} PATTERN "src" EXCLUDE)

set(CPACK_GENERATOR "DEB")
set(CPACK_PACKAGE_NAME "loadtrim")
set(CPACK_PACKAGE_VERSION "${PROJECT_VERSION}")
set(CPACK_PACKAGE_VENDOR "loadtrim project")
set(CPACK_PACKAGE_CONTACT "loadtrim maintainers <loadtrim@example.org>")
set(CPACK_PACKAGE_DESCRIPTION_SUMMARY "road-load setting loop for chassis dynamometers, with a simulated controller")
set(CPACK_PACKAGE_DESCRIPTION
    "loadtrim finds chassis-dynamometer set coefficients that reproduce road-load targets (coast-downs, band times, "
    "the iterative and fixed-run methods), keeps sealed session records, runs the dyno's own checks and writes HTML "
    "reports. loadtrim-sim is a simulated controller for demos and tests; config and samples hold standard "
    "profiles, example cell files, invented demo data and a public US EPA extract.")
set(CPACK_DEBIAN_FILE_NAME DEB-DEFAULT)  # loadtrim_<version>_<arch>.deb
set(CPACK_DEBIAN_PACKAGE_SECTION "science")
set(CPACK_DEBIAN_PACKAGE_PRIORITY "optional")
set(CPACK_DEBIAN_PACKAGE_MAINTAINER "${CPACK_PACKAGE_CONTACT}")
# PDF reports are printed by headless Chromium when it is there; nothing else needs it.
set(CPACK_DEBIAN_PACKAGE_SUGGESTS "chromium")
# The binaries are built with debug information (RelWithDebInfo); the package carries them stripped.
set(CPACK_STRIP_FILES ON)
# Runtime dependencies: computed by dpkg-shlibdeps (package dpkg-dev) from the libraries the binaries link, else
# listed by hand (what dpkg-shlibdeps gave on Debian 12; check with `ldd build/bin/loadtrim build/bin/loadtrim-sim`
# when a dependency is added).
find_program(LOADTRIM_DPKG_SHLIBDEPS dpkg-shlibdeps)
if(LOADTRIM_DPKG_SHLIBDEPS)
  set(CPACK_DEBIAN_PACKAGE_SHLIBDEPS ON)
else()
  message(STATUS "dpkg-shlibdeps not found (package dpkg-dev): the .deb's Depends are the hand-written list")
  set(CPACK_DEBIAN_PACKAGE_DEPENDS
      "libc6, libgcc-s1, libmodbus5, libnlopt0, libpq5, libspdlog1.10-fmt9, libsqlite3-0, libssl3, libstdc++6, libtomlplusplus3")
endif()
include(CPack)
