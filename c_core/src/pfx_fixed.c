/*
 * pfx_fixed.c - fixed-point primitives.  See pfx_fixed.h for the contract of
 * each function (scaling, overflow, rounding, error bound).
 *
 * Portability notes that apply throughout:
 *   - Signed values are never shifted right while negative and never
 *     shifted left at all; floor shifts go through unsigned magnitudes.
 *   - Conversions to a signed type only ever carry values in its range;
 *     magnitudes are taken as (unsigned)(-(v + 1)) + 1, defined for every
 *     v, INT32_MIN included.
 *   - Narrow unsigned values (uint16_t table entries) are widened to
 *     uint32_t before any shift or multiply, so integer promotion to int
 *     can never produce a signed overflow.
 *
 * The tables and polynomial constants are generated from their defining
 * formulas by peerfix.core.quantise (log2_table, exp2_table, exp2_poly,
 * recip_seed_table); tests/core checks that the arrays here equal those.
 * One table is fitted instead, k_rsqrt_line_q30 (square-root seeds): only its
 * error bound matters, and tests/core checks that bound.
 */
#include "peerfix.h"

/* ------------------------------------------------------------------------ */
/* tables                                                                     */
/* ------------------------------------------------------------------------ */

/* round(log2(1 + k/256) * 2^24), k = 0..256 (Q24; last entry 2^24). */
static const uint32_t k_log2_table_q24[257] = {
    0u, 94364u, 188362u, 281996u, 375270u, 468185u, 560745u, 652952u,
    744810u, 836320u, 927485u, 1018309u, 1108793u, 1198939u, 1288752u, 1378232u,
    1467383u, 1556207u, 1644705u, 1732882u, 1820738u, 1908277u, 1995500u, 2082410u,
    2169009u, 2255299u, 2341283u, 2426963u, 2512340u, 2597417u, 2682196u, 2766679u,
    2850868u, 2934766u, 3018374u, 3101694u, 3184728u, 3267478u, 3349946u, 3432134u,
    3514044u, 3595678u, 3677038u, 3758124u, 3838941u, 3919488u, 3999768u, 4079782u,
    4159533u, 4239023u, 4318251u, 4397222u, 4475935u, 4554394u, 4632599u, 4710552u,
    4788255u, 4865709u, 4942916u, 5019878u, 5096595u, 5173071u, 5249305u, 5325300u,
    5401057u, 5476578u, 5551864u, 5626916u, 5701737u, 5776327u, 5850688u, 5924821u,
    5998727u, 6072409u, 6145867u, 6219103u, 6292118u, 6364913u, 6437490u, 6509850u,
    6581994u, 6653924u, 6725641u, 6797146u, 6868440u, 6939525u, 7010402u, 7081072u,
    7151536u, 7221795u, 7291852u, 7361706u, 7431359u, 7500812u, 7570066u, 7639123u,
    7707984u, 7776649u, 7845119u, 7913397u, 7981483u, 8049377u, 8117082u, 8184598u,
    8251926u, 8319067u, 8386022u, 8452793u, 8519380u, 8585785u, 8652008u, 8718050u,
    8783912u, 8849596u, 8915102u, 8980431u, 9045584u, 9110562u, 9175366u, 9239998u,
    9304457u, 9368745u, 9432863u, 9496811u, 9560591u, 9624203u, 9687648u, 9750928u,
    9814042u, 9876993u, 9939780u, 10002404u, 10064867u, 10127170u, 10189312u, 10251295u,
    10313120u, 10374787u, 10436298u, 10497652u, 10558852u, 10619897u, 10680789u, 10741528u,
    10802114u, 10862550u, 10922835u, 10982970u, 11042956u, 11102794u, 11162484u, 11222028u,
    11281425u, 11340677u, 11399784u, 11458748u, 11517568u, 11576245u, 11634780u, 11693175u,
    11751428u, 11809542u, 11867517u, 11925353u, 11983051u, 12040612u, 12098037u, 12155325u,
    12212479u, 12269497u, 12326382u, 12383133u, 12439752u, 12496238u, 12552593u, 12608817u,
    12664911u, 12720875u, 12776710u, 12832416u, 12887994u, 12943445u, 12998770u, 13053968u,
    13109041u, 13163988u, 13218811u, 13273511u, 13328087u, 13382540u, 13436871u, 13491080u,
    13545168u, 13599135u, 13652983u, 13706711u, 13760320u, 13813810u, 13867183u, 13920438u,
    13973576u, 14026597u, 14079503u, 14132294u, 14184969u, 14237530u, 14289978u, 14342312u,
    14394532u, 14446641u, 14498638u, 14550523u, 14602297u, 14653961u, 14705514u, 14756958u,
    14808293u, 14859519u, 14910637u, 14961648u, 15012551u, 15063347u, 15114037u, 15164621u,
    15215099u, 15265473u, 15315742u, 15365906u, 15415967u, 15465925u, 15515779u, 15565531u,
    15615181u, 15664730u, 15714177u, 15763523u, 15812769u, 15861915u, 15910962u, 15959909u,
    16008758u, 16057508u, 16106160u, 16154714u, 16203172u, 16251532u, 16299796u, 16347964u,
    16396036u, 16444013u, 16491896u, 16539683u, 16587377u, 16634976u, 16682482u, 16729896u,
    16777216u
};
/* round((2^(k/256) - 1) * 2^32), k = 0..255 (Q32 fraction above 1). */
static const uint32_t k_exp2_table_q32[256] = {
    0x00000000u, 0x00B1AFA6u, 0x0163DAA0u, 0x02168144u, 0x02C9A3E7u, 0x037D42E1u,
    0x04315E87u, 0x04E5F72Fu, 0x059B0D31u, 0x0650A0E4u, 0x0706B29Eu, 0x07BD42B7u,
    0x08745187u, 0x092BDF66u, 0x09E3ECACu, 0x0A9C79B2u, 0x0B5586D0u, 0x0C0F145Eu,
    0x0CC922B7u, 0x0D83B234u, 0x0E3EC32Du, 0x0EFA55FEu, 0x0FB66B00u, 0x1073028Du,
    0x11301D01u, 0x11EDBAB6u, 0x12ABDC07u, 0x136A814Fu, 0x1429AAEBu, 0x14E95935u,
    0x15A98C8Au, 0x166A4547u, 0x172B83C8u, 0x17ED4869u, 0x18AF9389u, 0x19726583u,
    0x1A35BEB7u, 0x1AF99F81u, 0x1BBE0840u, 0x1C82F953u, 0x1D487317u, 0x1E0E75EBu,
    0x1ED50230u, 0x1F9C1844u, 0x2063B886u, 0x212BE358u, 0x21F49918u, 0x22BDDA28u,
    0x2387A6E7u, 0x2451FFB8u, 0x251CE4FBu, 0x25E85712u, 0x26B4565Eu, 0x2780E342u,
    0x284DFE1Fu, 0x291BA759u, 0x29E9DF52u, 0x2AB8A66Du, 0x2B87FD0Eu, 0x2C57E397u,
    0x2D285A6Eu, 0x2DF961F6u, 0x2ECAFA94u, 0x2F9D24ACu, 0x306FE0A3u, 0x31432EDFu,
    0x32170FC5u, 0x32EB83BBu, 0x33C08B26u, 0x3496266Eu, 0x356C55F9u, 0x36431A2Eu,
    0x371A7374u, 0x37F26232u, 0x38CAE6D0u, 0x39A401B7u, 0x3A7DB34Eu, 0x3B57FBFFu,
    0x3C32DC31u, 0x3D0E544Fu, 0x3DEA64C1u, 0x3EC70DF2u, 0x3FA4504Bu, 0x40822C36u,
    0x4160A21Fu, 0x423FB271u, 0x431F5D95u, 0x43FFA3F8u, 0x44E08606u, 0x45C2042Au,
    0x46A41ED2u, 0x4786D669u, 0x486A2B5Cu, 0x494E1E19u, 0x4A32AF0Du, 0x4B17DEA7u,
    0x4BFDAD53u, 0x4CE41B81u, 0x4DCB29A0u, 0x4EB2D81Eu, 0x4F9B276Au, 0x508417F4u,
    0x516DAA2Du, 0x5257DE84u, 0x5342B56Au, 0x542E2F4Fu, 0x551A4CA6u, 0x56070DDFu,
    0x56F4736Bu, 0x57E27DBEu, 0x58D12D49u, 0x59C08280u, 0x5AB07DD5u, 0x5BA11FBBu,
    0x5C9268A6u, 0x5D84590Au, 0x5E76F15Bu, 0x5F6A320Eu, 0x605E1B97u, 0x6152AE6Du,
    0x6247EB04u, 0x633DD1D2u, 0x6434634Du, 0x652B9FECu, 0x66238825u, 0x671C1C71u,
    0x68155D45u, 0x690F4B1Au, 0x6A09E668u, 0x6B052FA7u, 0x6C012751u, 0x6CFDCDDDu,
    0x6DFB23C6u, 0x6EF92986u, 0x6FF7DF95u, 0x70F7466Fu, 0x71F75E8Fu, 0x72F8286Fu,
    0x73F9A48Au, 0x74FBD35Du, 0x75FEB564u, 0x77024B1Bu, 0x780694FEu, 0x790B938Bu,
    0x7A11473Fu, 0x7B17B097u, 0x7C1ED013u, 0x7D26A630u, 0x7E2F336Du, 0x7F387849u,
    0x80427544u, 0x814D2ADDu, 0x82589995u, 0x8364C1ECu, 0x8471A462u, 0x857F417Au,
    0x868D99B4u, 0x879CAD93u, 0x88AC7D99u, 0x89BD0A48u, 0x8ACE5423u, 0x8BE05BADu,
    0x8CF3216Bu, 0x8E06A5E1u, 0x8F1AE991u, 0x902FED03u, 0x9145B0B9u, 0x925C353Bu,
    0x93737B0Du, 0x948B82B6u, 0x95A44CBDu, 0x96BDD9A7u, 0x97D829FEu, 0x98F33E48u,
    0x9A0F170Du, 0x9B2BB4D5u, 0x9C49182Au, 0x9D674195u, 0x9E86319Eu, 0x9FA5E8D0u,
    0xA0C667B6u, 0xA1E7AED9u, 0xA309BEC5u, 0xA42C9804u, 0xA5503B24u, 0xA674A8AFu,
    0xA799E133u, 0xA8BFE53Cu, 0xA9E6B558u, 0xAB0E5213u, 0xAC36BBFDu, 0xAD5FF3A4u,
    0xAE89F996u, 0xAFB4CE62u, 0xB0E07299u, 0xB20CE6CAu, 0xB33A2B85u, 0xB468415Bu,
    0xB59728DEu, 0xB6C6E29Fu, 0xB7F76F30u, 0xB928CF22u, 0xBA5B030Au, 0xBB8E0B7Au,
    0xBCC1E905u, 0xBDF69C3Fu, 0xBF2C25BDu, 0xC0628614u, 0xC199BDD8u, 0xC2D1CDA0u,
    0xC40AB600u, 0xC5447790u, 0xC67F12E5u, 0xC7BA8899u, 0xC8F6D940u, 0xCA340575u,
    0xCB720DCFu, 0xCCB0F2E7u, 0xCDF0B556u, 0xCF3155B6u, 0xD072D4A0u, 0xD1B532B1u,
    0xD2F87081u, 0xD43C8EADu, 0xD5818DD0u, 0xD6C76E86u, 0xD80E316Du, 0xD955D720u,
    0xDA9E603Eu, 0xDBE7CD64u, 0xDD321F30u, 0xDE7D5642u, 0xDFC97338u, 0xE11676B2u,
    0xE264614Fu, 0xE3B333B1u, 0xE502EE79u, 0xE6539246u, 0xE7A51FBCu, 0xE8F7977Du,
    0xEA4AFA2Au, 0xEB9F4868u, 0xECF482D9u, 0xEE4AAA22u, 0xEFA1BEE6u, 0xF0F9C1CBu,
    0xF252B377u, 0xF3AC948Eu, 0xF50765B7u, 0xF6632799u, 0xF7BFDADAu, 0xF91D8022u,
    0xFA7C181Au, 0xFBDBA369u, 0xFD3C22B9u, 0xFE9D96B3u
};
/* round(2^15 / ((128.5 + i) / 256)), i = 0..127: 1/D seeds at the middle of
 * each of 128 intervals of D in [0.5, 1), Q15 (all < 2^16). */
static const uint16_t k_recip_seed_q15[128] = {
    65281u, 64777u, 64281u, 63792u, 63310u, 62836u, 62369u, 61909u, 61455u, 61008u,
    60568u, 60133u, 59705u, 59283u, 58867u, 58457u, 58053u, 57654u, 57260u, 56872u,
    56489u, 56111u, 55738u, 55370u, 55007u, 54649u, 54295u, 53946u, 53601u, 53261u,
    52925u, 52593u, 52265u, 51942u, 51622u, 51306u, 50995u, 50686u, 50382u, 50081u,
    49784u, 49490u, 49200u, 48913u, 48630u, 48349u, 48072u, 47798u, 47528u, 47260u,
    46995u, 46733u, 46474u, 46218u, 45965u, 45714u, 45467u, 45222u, 44979u, 44739u,
    44502u, 44267u, 44035u, 43805u, 43577u, 43352u, 43129u, 42908u, 42690u, 42474u,
    42260u, 42048u, 41838u, 41631u, 41425u, 41222u, 41020u, 40820u, 40623u, 40427u,
    40233u, 40041u, 39851u, 39662u, 39476u, 39291u, 39108u, 38926u, 38746u, 38568u,
    38392u, 38217u, 38044u, 37872u, 37702u, 37533u, 37366u, 37200u, 37036u, 36873u,
    36712u, 36552u, 36393u, 36236u, 36080u, 35926u, 35772u, 35620u, 35470u, 35320u,
    35172u, 35026u, 34880u, 34735u, 34592u, 34450u, 34309u, 34169u, 34031u, 33893u,
    33757u, 33622u, 33487u, 33354u, 33222u, 33091u, 32961u, 32832u
};
/* e(t) = 2^(t/2^16) - 1 for t in 0..255, in Q56:
 * t*C1 + t^2*C2 + t^3*C3/2^16 + t^4*C4/2^32 with
 * C1 = ln2 * 2^40, C2 = ln2^2/2 * 2^24, C3 = ln2^3/6 * 2^24, C4 = ln2^4/24 * 2^24
 * (all rounded).  The t^5 term is < 2^-45 and left out. */
#define PFX_EXP2_C1 UINT64_C(762123384786)
#define PFX_EXP2_C2 UINT64_C(4030332)
#define PFX_EXP2_C3 UINT64_C(931204)
#define PFX_EXP2_C4 UINT64_C(161365)

/* ------------------------------------------------------------------------ */
/* internal helpers                                                           */
/* ------------------------------------------------------------------------ */

/* |v| as unsigned, exact for INT32_MIN (2^31): -(v + 1) is in range for
 * every v, and no unsigned arithmetic wraps either (clean under clang's
 * -fsanitize=integer as well). */
static uint32_t mag32(int32_t v)
{
    return (v < 0) ? (uint32_t)(-(v + 1)) + 1u : (uint32_t)v;
}

static uint64_t mag64(int64_t v)
{
    return (v < 0) ? (uint64_t)(-(v + 1)) + 1u : (uint64_t)v;
}

/* -m as int32 for a magnitude m <= 2^31. */
static int32_t neg_from_mag32(uint32_t m)
{
    return (m == UINT32_C(0x80000000)) ? INT32_MIN : -(int32_t)m;
}

/* -m as int64 for a magnitude m <= 2^63. */
static int64_t neg_from_mag64(uint64_t m)
{
    return (m == (UINT64_C(1) << 63)) ? INT64_MIN : -(int64_t)m;
}

/* round(m / 2^s) for unsigned m, ties up, any s; never overflows because the
 * rounding bit is added to the quotient, not to m. */
static uint64_t round_shift_u64(uint64_t m, unsigned s)
{
    if (s == 0u) {
        return m;
    }
    if (s > 64u) {
        return 0u;
    }
    if (s == 64u) {
        return m >> 63;
    }
    return (m >> s) + ((m >> (s - 1u)) & 1u);
}

/* ------------------------------------------------------------------------ */
/* leading zeros                                                              */
/* ------------------------------------------------------------------------ */

#if defined(PFX_USE_BUILTIN_CLZ)
#if !defined(__GNUC__)
#error "PFX_USE_BUILTIN_CLZ needs gcc or clang (__builtin_clz)"
#endif
/* The builtins take unsigned int / unsigned long long: check their widths. */
typedef char pfx_clz_width_check[(sizeof(unsigned int) == 4u && sizeof(unsigned long long) == 8u) ? 1 : -1];
#endif

unsigned pfx_fixed_clz32(uint32_t x)
{
    return pfx_fixed_clz32_inline(x);
}

unsigned pfx_fixed_clz64(uint64_t x)
{
#if defined(PFX_USE_BUILTIN_CLZ)
    return (x == 0u) ? 64u : (unsigned)__builtin_clzll((unsigned long long)x);
#else
    uint32_t hi = (uint32_t)(x >> 32);
    if (hi != 0u) {
        return pfx_fixed_clz32(hi);
    }
    return 32u + pfx_fixed_clz32((uint32_t)x);
#endif
}

/* ------------------------------------------------------------------------ */
/* saturation and clamps                                                      */
/* ------------------------------------------------------------------------ */

int32_t pfx_fixed_sat32(int64_t x)
{
    if (x > INT32_MAX) {
        return INT32_MAX;
    }
    if (x < INT32_MIN) {
        return INT32_MIN;
    }
    return (int32_t)x;
}

int32_t pfx_fixed_clamp(int32_t x, int32_t lo, int32_t hi)
{
    if (x < lo) {
        return lo;
    }
    if (x > hi) {
        return hi;
    }
    return x;
}

int64_t pfx_fixed_clamp64(int64_t x, int64_t lo, int64_t hi)
{
    if (x < lo) {
        return lo;
    }
    if (x > hi) {
        return hi;
    }
    return x;
}

/* Scaling: none.  Overflow: the sum is formed in int64 (cannot overflow),
 * then saturated.  Rounding: exact. */
int32_t pfx_fixed_add_sat(int32_t a, int32_t b)
{
    return pfx_fixed_sat32((int64_t)a + (int64_t)b);
}

int32_t pfx_fixed_sub_sat(int32_t a, int32_t b)
{
    return pfx_fixed_sat32((int64_t)a - (int64_t)b);
}

int32_t pfx_fixed_neg_sat(int32_t a)
{
    return (a == INT32_MIN) ? INT32_MAX : -a;
}

int32_t pfx_fixed_abs_sat(int32_t a)
{
    return (a < 0) ? pfx_fixed_neg_sat(a) : a;
}

/* Overflow: tested against the limits before the operation, so the
 * operation itself is only done when its result is in range. */
int64_t pfx_fixed_add64_sat(int64_t a, int64_t b)
{
    if (b > 0 && a > INT64_MAX - b) {
        return INT64_MAX;
    }
    if (b < 0 && a < INT64_MIN - b) {
        return INT64_MIN;
    }
    return a + b;
}

int64_t pfx_fixed_sub64_sat(int64_t a, int64_t b)
{
    if (b < 0 && a > INT64_MAX + b) {
        return INT64_MAX;
    }
    if (b > 0 && a < INT64_MIN + b) {
        return INT64_MIN;
    }
    return a - b;
}

/* ------------------------------------------------------------------------ */
/* shifts                                                                     */
/* ------------------------------------------------------------------------ */

/* floor(x / 2^s).  For x < 0: floor(x / 2^s) = -floor((-x - 1) / 2^s) - 1,
 * and -x - 1 = -(x + 1) is in range for every x (INT32_MIN included). */
int32_t pfx_fixed_shr_floor(int32_t x, unsigned s)
{
    uint32_t q;
    if (s > 31u) {
        return (x < 0) ? -1 : 0;
    }
    if (x >= 0) {
        return (int32_t)((uint32_t)x >> s);
    }
    q = (uint32_t)(-(x + 1)) >> s;
    return -(int32_t)q - 1;
}

/* round(x / 2^s), ties toward +infinity: floor(x / 2^s) plus bit s-1 of x
 * (that bit of the two's complement pattern is the half-LSB of the
 * remainder), which equals floor((x + 2^(s-1)) / 2^s) without forming
 * x + 2^(s-1).  For s >= 32, |x / 2^s| <= 1/2 and the result is 0. */
int32_t pfx_fixed_shr_round(int32_t x, unsigned s)
{
    uint32_t half;
    if (s == 0u) {
        return x;
    }
    if (s > 31u) {
        return 0;
    }
    half = ((uint32_t)x >> (s - 1u)) & 1u;
#if defined(PFX_VARIANT_TIES_DOWN)
    /* Test-only variant (never in a release build): ties round toward
     * -infinity instead of +infinity.  The release-regression tests build it
     * to prove that `peerfix baseline check` notices a one-LSB change. */
    if (half != 0u && ((uint32_t)x & ((UINT32_C(1) << (s - 1u)) - 1u)) == 0u) {
        half = 0u;
    }
#endif
    return pfx_fixed_shr_floor(x, s) + (int32_t)half;
}

int64_t pfx_fixed_shr64_floor(int64_t x, unsigned s)
{
    uint64_t q;
    if (s > 63u) {
        return (x < 0) ? -1 : 0;
    }
    if (x >= 0) {
        return (int64_t)((uint64_t)x >> s);
    }
    q = (uint64_t)(-(x + 1)) >> s;
    return -(int64_t)q - 1;
}

int64_t pfx_fixed_shr64_round(int64_t x, unsigned s)
{
    uint64_t half;
    if (s == 0u) {
        return x;
    }
    if (s > 63u) {
        return 0;
    }
    half = ((uint64_t)x >> (s - 1u)) & 1u;
    return pfx_fixed_shr64_floor(x, s) + (int64_t)half;
}

/* Accumulator to int32: one rounding, then saturation. */
int32_t pfx_fixed_shr64_round_sat32(int64_t x, unsigned s)
{
    return pfx_fixed_sat32(pfx_fixed_shr64_round(x, s));
}

/* x * 2^s, saturated: compared against INT32_MAX >> s (a shift of a positive
 * value) before multiplying, so the multiply is always in range. */
int32_t pfx_fixed_shl_sat(int32_t x, unsigned s)
{
    int32_t lim;
    if (x == 0) {
        return 0;
    }
    if (s > 30u) {
        return (x > 0) ? INT32_MAX : INT32_MIN;
    }
    lim = (int32_t)(INT32_MAX >> s);
    if (x > lim) {
        return INT32_MAX;
    }
    if (x < -lim - 1) {
        return INT32_MIN;
    }
    return x * (int32_t)(INT32_C(1) << s);
}

int64_t pfx_fixed_shl64_sat(int64_t x, unsigned s)
{
    int64_t lim;
    if (x == 0) {
        return 0;
    }
    if (s > 62u) {
        return (x > 0) ? INT64_MAX : INT64_MIN;
    }
    lim = INT64_MAX >> s;
    if (x > lim) {
        return INT64_MAX;
    }
    if (x < -lim - 1) {
        return INT64_MIN;
    }
    return x * (INT64_C(1) << s);
}

/* ------------------------------------------------------------------------ */
/* multiply                                                                   */
/* ------------------------------------------------------------------------ */

int64_t pfx_fixed_mul_wide(int32_t a, int32_t b)
{
    return (int64_t)a * (int64_t)b;
}

/* Scaling: Qa * Qb / 2^s = Q(a+b-s).  Accumulator: exact int64 product
 * (62 bits + sign).  Rounding: once, to nearest, ties up.  Saturates. */
int32_t pfx_fixed_mul_sat(int32_t a, int32_t b, unsigned s)
{
    return pfx_fixed_sat32(pfx_fixed_shr64_round(pfx_fixed_mul_wide(a, b), s));
}

/* Scaling: acc and a*b must share a Q format.  Overflow: saturates the
 * int64 sum instead of wrapping.  Rounding: exact. */
int64_t pfx_fixed_mac_sat(int64_t acc, int32_t a, int32_t b)
{
    return pfx_fixed_add64_sat(acc, pfx_fixed_mul_wide(a, b));
}

/* ------------------------------------------------------------------------ */
/* divide                                                                     */
/* ------------------------------------------------------------------------ */

/* Magnitude quotient q = n / d rounded for the sign of the true quotient.
 * Positive: q + (2r >= d); negative: the magnitude grows only when the
 * remainder is strictly above half (ties go toward +infinity). */
static uint64_t round_quotient(uint64_t q, uint64_t r, uint64_t d, int negative)
{
    /* r < d <= 2^63, so 2r < 2^64. */
    uint64_t twice_r = r << 1;
    if (negative) {
        return q + ((twice_r > d) ? 1u : 0u);
    }
    return q + ((twice_r >= d) ? 1u : 0u);
}

pfx_status_t pfx_fixed_div_sat(int32_t a, int32_t b, unsigned s, int32_t *out)
{
    uint64_t n;
    uint64_t q;
    uint64_t r;
    uint32_t d;
    int negative;

    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (s > 32u) {
        *out = 0;
        return PFX_ERR_ARG;
    }
    if (b == 0) {
        *out = (a > 0) ? INT32_MAX : ((a < 0) ? INT32_MIN : 0);
        return PFX_ERR_DOMAIN;
    }
    n = (uint64_t)mag32(a) << s; /* <= 2^31 * 2^32 = 2^63 */
    d = mag32(b);
    negative = ((a < 0) != (b < 0));
    if (n <= UINT32_MAX) {
        /* 32-bit divide: UDIV on Cortex-M3/M4, the short helper on M0+. */
        uint32_t n32 = (uint32_t)n;
        q = n32 / d;
        r = n32 % d;
    } else {
        q = n / d;
        r = n % d;
    }
    q = round_quotient(q, r, d, negative);
    if (!negative) {
        if (q > (uint64_t)INT32_MAX) {
            *out = INT32_MAX;
            return PFX_ERR_RANGE;
        }
        *out = (int32_t)q;
        return PFX_OK;
    }
    if (q > UINT64_C(0x80000000)) {
        *out = INT32_MIN;
        return PFX_ERR_RANGE;
    }
    *out = neg_from_mag32((uint32_t)q);
    return PFX_OK;
}

pfx_status_t pfx_fixed_div64_sat(int64_t n, int64_t d, int64_t *out)
{
    uint64_t un;
    uint64_t ud;
    uint64_t q;
    uint64_t r;
    int negative;

    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (d == 0) {
        *out = (n > 0) ? INT64_MAX : ((n < 0) ? INT64_MIN : 0);
        return PFX_ERR_DOMAIN;
    }
    un = mag64(n);
    ud = mag64(d);
    negative = ((n < 0) != (d < 0));
    if (un <= UINT32_MAX && ud <= UINT32_MAX) {
        uint32_t n32 = (uint32_t)un;
        uint32_t d32 = (uint32_t)ud;
        q = n32 / d32;
        r = n32 % d32;
    } else {
        q = un / ud;
        r = un % ud;
    }
    q = round_quotient(q, r, ud, negative);
    if (!negative) {
        if (q > (uint64_t)INT64_MAX) { /* only INT64_MIN / -1 */
            *out = INT64_MAX;
            return PFX_ERR_RANGE;
        }
        *out = (int64_t)q;
        return PFX_OK;
    }
    /* Negative magnitudes are <= 2^63 here: q <= 2^63 for d = +-1 (no
     * remainder), q <= 2^62 + 1 otherwise. */
    *out = neg_from_mag64(q);
    return PFX_OK;
}

/*
 * Reciprocal.  d = dn * 2^-c with dn = d << c in [2^31, 2^32), i.e.
 * D = dn / 2^32 in [0.5, 1); 1/d = 2^c / dn = Y * 2^(c - 62) with
 * Y = 2^62 / dn in (2^30, 2^31) for dn > 2^31.
 * Seed: y0 = 1/D at the middle of D's 1/256-wide interval, relative error
 * below 2^-8.  Two Newton steps y <- y (2 - D y) on 32x32 -> 64 products,
 * both kept at or below Y (the first by a margin of 2 LSB, the second
 * from below), leave y at most 2 LSB under Y (exhaustive over every dn);
 * the remainder 2^62 - dn*y then gives the correctly rounded 2^62 / dn,
 * the y with |2^62 - dn*y| <= dn/2 (never a tie: 2^63 has no odd factor).
 * dn*y stays at most 2^62 because y <= Y throughout.
 */
pfx_status_t pfx_fixed_recip(uint32_t d, pfx_mant_q30_t *mant, unsigned *shift)
{
    const uint64_t one_q62 = UINT64_C(1) << 62;
    unsigned c;
    uint32_t dn;
    uint32_t y;
    uint32_t t;
    uint64_t p;
    uint64_t r;
    uint32_t half;

    if (mant == NULL || shift == NULL) {
        return PFX_ERR_ARG;
    }
    if (d == 0u) {
        *mant = 0;
        *shift = 0u;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz32(d);
    dn = d << c;
    if (dn == UINT32_C(0x80000000)) { /* power of two: exact */
        *mant = (pfx_mant_q30_t)(INT32_C(1) << 30);
        *shift = 61u - c;
        return PFX_OK;
    }
    y = (uint32_t)k_recip_seed_q15[(dn >> 24) - 128u] << 15;
    /* y (2 - D y): t = D y in Q30 (< 2^31); the truncations raise y by at
     * most 2, taken off, so y <= 2^62 / dn (the exact step never overshoots). */
    t = (uint32_t)(((uint64_t)dn * y) >> 32);
    y = (uint32_t)(((uint64_t)y * ((UINT32_C(1) << 31) - t)) >> 30) - 2u;
    /* From below: e = 2^62 - dn y in [0, 2^48) (relative error < 2^-15.9
     * after the first step), y += y e / 2^62 rounded down (e / 2^16 < 2^32):
     * y stays <= 2^62 / dn, within 2 of it. */
    p = (uint64_t)dn * y;
    y += (uint32_t)(((uint64_t)y * (uint32_t)((one_q62 - p) >> 16)) >> 46);
    /* Exact: r = 2^62 - dn y >= 0; whole steps while r >= dn, then one more
     * when r > dn / 2 (r = dn / 2 is impossible, see above). */
    p = (uint64_t)dn * y;
    r = one_q62 - p;
    while (r >= dn) {
        r -= dn;
        ++y;
    }
    half = dn >> 1;
    if (r > half) {
        ++y;
    }
    *mant = (pfx_mant_q30_t)y; /* y in (2^30, 2^31) */
    *shift = 62u - c;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* square roots                                                               */
/* ------------------------------------------------------------------------ */

/* Digit-by-digit square root (base 4): after the loop, root = floor(sqrt(x))
 * and *rem = x - root^2 <= 2 * root.  Only shifts, adds and compares. */
static uint32_t isqrt32_rem(uint32_t x, uint32_t *rem)
{
    uint32_t root = 0u;
    uint32_t bit = UINT32_C(1) << 30;
    while (bit > x) {
        bit >>= 2;
    }
    while (bit != 0u) {
        if (x >= root + bit) {
            x -= root + bit;
            root = (root >> 1) + bit;
        } else {
            root >>= 1;
        }
        bit >>= 2;
    }
    *rem = x;
    return root;
}

/* Seeds of y = 2^30 / sqrt(m / 2^32) for m in [2^30, 2^32): on each eighth
 * k = m >> 29 (2..7) the line y = A - B m / 2^32 of least maximum relative
 * error (A, B in Q30; error below 2^-7 on every piece).  Only a bound on
 * the error matters: the square root below ends in an exact step. */
static const uint32_t k_rsqrt_line_q30[6][2] = {
    {2913092172u, 3128366932u}, {2448634440u, 1872026500u}, {2154714734u, 1279508901u},
    {1946840366u, 945227269u},  {1789687537u, 734956669u},  {1665441026u, 592596258u}
};

/* One Newton step y <- y (3 - M y^2) / 2 for y = 2^30 / sqrt(M) (Q30), M =
 * m / 2^32: y^2 and M y^2 in Q28 (high words of 32x32 -> 64 products),
 * then y (3 - M y^2) / 2 back in Q30.  The exact step never overshoots
 * 2^30 / sqrt(M); the truncations move y up by at most 8 (u is at most 2
 * low), and y <= 2^31 + 8 keeps every product below 2^63. */
static uint32_t rsqrt_step(uint32_t m, uint32_t y)
{
    uint32_t t = (uint32_t)(((uint64_t)y * y) >> 32);
    uint32_t u = (uint32_t)(((uint64_t)m * t) >> 32);
    return (uint32_t)(((uint64_t)y * ((UINT32_C(3) << 28) - u)) >> 29);
}

/* floor(sqrt(x)) and *rem = x - root^2 (<= 2 root), from multiplies.
 * xn = x 2^z in [2^62, 2^64) (z even), m its high word.  The seed and two
 * Newton steps give y within 2^-22 of 2^30 / sqrt(m / 2^32); 16 is taken
 * off, so y <= 2^30 / sqrt(m / 2^32) - 8 (both checked over every m).  Then
 * s = m y / 2^30 <= sqrt(xn) and e = xn - s^2 in [0, 2^44); the step
 * s += (e / 2^12) y / 2^51 (at most e / (2 sqrt(xn)), the Newton step from
 * below) leaves s in [floor(sqrt(xn)) - 1, floor(sqrt(xn))].  So
 * s / 2^(z/2) is floor(sqrt(x)) or one below it; one exact test of the
 * remainder settles which. */
static inline uint32_t isqrt64_rem(uint64_t x, uint64_t *rem)
{
    uint32_t hi = (uint32_t)(x >> 32);
    unsigned z;
    uint64_t xn, e;
    uint32_t m, y, s, r;
    const uint32_t *line;
    if (x == 0u) {
        *rem = 0u;
        return 0u;
    }
    z = ((hi != 0u) ? pfx_fixed_clz32_inline(hi) : 32u + pfx_fixed_clz32_inline((uint32_t)x)) & ~1u;
    xn = x << z;
    m = (uint32_t)(xn >> 32);
    line = k_rsqrt_line_q30[(m >> 29) - 2u];
    y = line[0] - (uint32_t)(((uint64_t)line[1] * m) >> 32);
    y = rsqrt_step(m, y);
    y = rsqrt_step(m, y) - 16u;
    s = (uint32_t)(((uint64_t)m * y) >> 30);
    e = xn - (uint64_t)s * s;
    s += (uint32_t)(((uint64_t)(uint32_t)(e >> 12) * y) >> 51);
    r = s >> (z / 2u);
    e = x - (uint64_t)r * r;
    if (e > 2u * (uint64_t)r) {
        e -= 2u * (uint64_t)r + 1u;
        ++r;
    }
    *rem = e;
    return r;
}

uint32_t pfx_fixed_isqrt_u32(uint32_t x)
{
    uint32_t rem;
    return isqrt32_rem(x, &rem);
}

/* From the rounded root (one copy of the 64-bit root): it is one above the
 * floor exactly when its square exceeds x; 2^32 only for x > (2^32 - 1)^2. */
uint32_t pfx_fixed_isqrt_u64(uint64_t x)
{
    uint64_t r = pfx_fixed_isqrt_round_u64(x);
    if (r > UINT32_MAX) {
        return UINT32_MAX;
    }
    return (uint32_t)((r * r > x) ? r - 1u : r);
}

/* (root + 1/2)^2 = root^2 + root + 1/4, so sqrt(x) is nearer root + 1
 * exactly when x - root^2 > root. */
uint32_t pfx_fixed_isqrt_round_u32(uint32_t x)
{
    uint32_t rem;
    uint32_t root = isqrt32_rem(x, &rem);
    return root + ((rem > root) ? 1u : 0u);
}

uint64_t pfx_fixed_isqrt_round_u64(uint64_t x)
{
    uint64_t rem;
    uint64_t root = isqrt64_rem(x, &rem);
    return root + ((rem > root) ? 1u : 0u);
}

/* Scaling: sqrt(x / 2^fi) * 2^fo = sqrt(x * 2^(2 fo - fi)); the product is
 * formed exactly in 64 bits (k <= 32), one exact rounding, no overflow. */
pfx_status_t pfx_fixed_sqrt_q(uint32_t x, unsigned frac_in, unsigned frac_out, uint32_t *out)
{
    int64_t k;
    uint64_t r;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    k = 2 * (int64_t)frac_out - (int64_t)frac_in;
    if (k < 0 || k > 32) {
        *out = 0u;
        return PFX_ERR_ARG;
    }
    /* x * 2^k <= (2^32 - 1) * 2^32 = 2^64 - 2^32 < (2^32 - 1/2)^2, so the
     * rounded root is at most 2^32 - 1: it always fits. */
    r = pfx_fixed_isqrt_round_u64((uint64_t)x << (unsigned)k);
    *out = (uint32_t)r;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* log2                                                                       */
/* ------------------------------------------------------------------------ */

/* log2(m / 2^31) in Q24 for m in [2^31, 2^32): interval k from the 8 bits
 * below the leading one, linear interpolation on the next 15 bits.
 * (diff < 2^17) * (r < 2^15) < 2^32: one 32-bit multiply. */
static uint32_t log2_frac24(uint32_t m)
{
    uint32_t k = (m >> 23) & 0xFFu;
    uint32_t r = (m >> 8) & 0x7FFFu;
    uint32_t lo = k_log2_table_q24[k];
    uint32_t diff = k_log2_table_q24[k + 1u] - lo;
    return lo + ((diff * r + (UINT32_C(1) << 14)) >> 15);
}

/* n + log2(m / 2^31) in Q16, rounded once from Q24 (may carry into n). */
static pfx_log2_q16_t log2_from_norm(uint32_t m, unsigned n)
{
    uint32_t v = ((uint32_t)n << 16) + ((log2_frac24(m) + 128u) >> 8);
    return (pfx_log2_q16_t)v; /* <= 64 * 2^16 */
}

pfx_status_t pfx_fixed_log2_u32(uint32_t x, pfx_log2_q16_t *out)
{
    unsigned c;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (x == 0u) {
        *out = INT32_MIN;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz32(x);
    *out = log2_from_norm(x << c, 31u - c);
    return PFX_OK;
}

pfx_status_t pfx_fixed_log2_u64(uint64_t x, pfx_log2_q16_t *out)
{
    unsigned c;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (x == 0u) {
        *out = INT32_MIN;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz64(x);
    *out = log2_from_norm((uint32_t)((x << c) >> 32), 63u - c);
    return PFX_OK;
}

pfx_status_t pfx_fixed_log2_q(uint32_t x, unsigned frac_bits, pfx_log2_q16_t *out)
{
    pfx_status_t st;
    pfx_log2_q16_t v;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (frac_bits > 63u) {
        *out = INT32_MIN;
        return PFX_ERR_ARG;
    }
    st = pfx_fixed_log2_u32(x, &v);
    if (st != PFX_OK) {
        *out = v;
        return st;
    }
    *out = v - (int32_t)(frac_bits << 16); /* both terms < 2^22 */
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* exp2                                                                       */
/* ------------------------------------------------------------------------ */

/* 2^(f / 2^16) in Q63 for f in [0, 2^16):
 * (1 + h) * (1 + e) = 1 + h + e + h*e with h = T[f >> 8] (Q32) and
 * e = e(f & 255) (Q40, < 2^32).  Terms in Q63: h << 31, e << 23,
 * (h * e) >> 9; every partial product fits in 64 bits and the sum is below
 * 2^64 (2^f < 2 - 2^-17).  Error against 2^f: table 2^-33, e 2^-41 plus its
 * truncated series, product truncation 2^-63: below 2e-10 in all. */
static uint64_t exp2_mant_q63(uint32_t f)
{
    uint64_t h = k_exp2_table_q32[f >> 8];
    uint32_t t = f & 0xFFu;
    uint32_t t2 = t * t;   /* < 2^16 */
    uint32_t t3 = t2 * t;  /* < 2^24 */
    uint32_t t4 = t2 * t2; /* < 2^32 */
    uint64_t e56 = (uint64_t)t * PFX_EXP2_C1 + (uint64_t)t2 * PFX_EXP2_C2 +
                   (((uint64_t)t3 * PFX_EXP2_C3 + (UINT64_C(1) << 15)) >> 16) +
                   (((uint64_t)t4 * PFX_EXP2_C4 + (UINT64_C(1) << 31)) >> 32);
    uint64_t e40 = (e56 + (UINT64_C(1) << 15)) >> 16;
    return (UINT64_C(1) << 63) + (h << 31) + (e40 << 23) + (((uint64_t)(uint32_t)h * (uint32_t)e40) >> 9);
}

/* round_shift_u64(m, s) for 33 <= s <= 65 from the high word alone:
 * t = floor(m / 2^(s-1)) is a 32-bit shift of it (s - 1 >= 32), and the
 * result is floor(t / 2) plus the rounding bit t & 1 (s = 65: 0). */
static uint32_t round_shift_hi(uint64_t m, unsigned s)
{
    uint32_t t;
    if (s > 64u) {
        return 0u;
    }
    t = (uint32_t)(m >> 32) >> (s - 33u);
    return (t >> 1) + (t & 1u);
}

/* Scaling: x in Q16 -> 2^x in Q30.  n = floor(x) <= 0; the Q63 mantissa is
 * shifted by 33 - n with one rounding (ties up), so no double rounding. */
pfx_frac_q30_t pfx_fixed_exp2_frac_sat(pfx_log2_q16_t x)
{
    int32_t n;
    if (x > 0) {
        return (pfx_frac_q30_t)PFX_FIXED_FRAC_Q30_ONE;
    }
    n = pfx_fixed_shr_floor(x, 16u); /* in [-32768, 0]: shift 33 - n >= 33 */
    if (n < -32) {
        return 0; /* shift > 65 */
    }
    return (pfx_frac_q30_t)round_shift_hi(exp2_mant_q63((uint32_t)x & 0xFFFFu), (unsigned)(33 - n));
}

pfx_status_t pfx_fixed_exp2_split(pfx_log2_q16_t x, pfx_mant_q30_t *mant, int32_t *exponent)
{
    int32_t n;
    uint64_t m;
    if (mant == NULL || exponent == NULL) {
        return PFX_ERR_ARG;
    }
    n = pfx_fixed_shr_floor(x, 16u); /* in [-32768, 32767] */
    m = round_shift_u64(exp2_mant_q63((uint32_t)x & 0xFFFFu), 33u);
    if (m >= (UINT64_C(1) << 31)) { /* rounding reached 2.0; cannot happen for 16-bit f */
        m = UINT64_C(1) << 30;
        n += 1;
    }
    *mant = (pfx_mant_q30_t)m;
    *exponent = n;
    return PFX_OK;
}

/* Scaling: x in Q16 -> 2^x in Q(frac_bits).  The Q63 mantissa is shifted by
 * s = 63 - floor(x) - frac_bits; s <= 32 means 2^x * 2^frac_bits >= 2^31:
 * saturate.  One rounding, ties up; very negative x underflows to 0. */
int32_t pfx_fixed_exp2_q_sat(pfx_log2_q16_t x, unsigned frac_bits)
{
    int32_t n = pfx_fixed_shr_floor(x, 16u);
    int64_t s = 63 - (int64_t)n - (int64_t)frac_bits;
    uint64_t r;
    if (s <= 32) {
        return INT32_MAX;
    }
    r = round_shift_hi(exp2_mant_q63((uint32_t)x & 0xFFFFu), (s > 65) ? 65u : (unsigned)s); /* s >= 33 */
    return (r > (uint64_t)INT32_MAX) ? INT32_MAX : (int32_t)r;
}
