# Namespaced aliases: every library loadtrim_<name> defined anywhere in the build is also loadtrim::<name>.
# A `::` name that is not a target is an error when the build is generated (policy CMP0028), so a typo in a link line
# fails at once instead of being passed to the linker as a file name. Called once from the top-level CMakeLists.txt
# after every add_subdirectory(); link lines anywhere may use the aliases, since link items are resolved only when the
# build is generated. A library that declares its own alias beside add_library() keeps it.
function(loadtrim_add_namespaced_aliases dir)
  get_property(targets DIRECTORY "${dir}" PROPERTY BUILDSYSTEM_TARGETS)
  foreach(t IN LISTS targets)
    get_target_property(type ${t} TYPE)
    if(type MATCHES "^(STATIC|SHARED|MODULE|OBJECT|INTERFACE)_LIBRARY$" AND t MATCHES "^loadtrim_(.+)$")
      set(alias loadtrim::${CMAKE_MATCH_1})  # ${} is expanded before the condition runs: test it apart
      if(NOT TARGET ${alias})
        add_library(${alias} ALIAS ${t})
      endif()
    endif()
  endforeach()
  get_property(subdirs DIRECTORY "${dir}" PROPERTY SUBDIRECTORIES)
  foreach(sub IN LISTS subdirs)
    loadtrim_add_namespaced_aliases("${sub}")
  endforeach()
endfunction()
