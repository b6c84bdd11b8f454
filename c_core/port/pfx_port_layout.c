/*
 * pfx_port_layout.c - the target's view of the core's struct layouts.
 *
 * The budget harness copies structs byte for byte between the host (cffi)
 * and the emulated target, which is only right when both lay them out the
 * same.  This table records sizeof/offsetof as the cross compiler sees them;
 * the harness compares it with cffi's.  It lives in a non-allocated section
 * (.pfx_layout, see pfx_port.ld), so it takes no flash on the tag.
 */
#include <stddef.h>
#include "peerfix.h"

typedef struct {
    char name[40];
    uint32_t value;
} pfx_port_layout_entry_t;

#define SIZE(T) { "sizeof " #T, (uint32_t)sizeof(T) }
#define OFFSET(T, F) { "offsetof " #T " " #F, (uint32_t)offsetof(T, F) }

__attribute__((used, section(".pfx_layout")))
const pfx_port_layout_entry_t pfx_port_layout[] = {
    SIZE(pfx_component_t),
    SIZE(pfx_belief_t),
    SIZE(pfx_params_t),
    SIZE(pfx_estimate_t),
    SIZE(pfx_heard_t),
    SIZE(pfx_inbox_t),
    SIZE(pfx_mixture_scratch_t),
    SIZE(pfx_range_scratch_t),
    SIZE(pfx_workspace_t),
    SIZE(pfx_node_t),
    OFFSET(pfx_node_t, bounds),
    OFFSET(pfx_node_t, belief),
    OFFSET(pfx_node_t, prior),
    OFFSET(pfx_inbox_t, heard),
    OFFSET(pfx_heard_t, range),
    OFFSET(pfx_workspace_t, work_count),
    OFFSET(pfx_workspace_t, mix),
    OFFSET(pfx_workspace_t, range),
    OFFSET(pfx_workspace_t, order),
    OFFSET(pfx_workspace_t, order_key),
    OFFSET(pfx_mixture_scratch_t, weight),
    OFFSET(pfx_mixture_scratch_t, tmp),
};
