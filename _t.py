import setkit, setkit.testing, time
from setkit.families import known_kinds, lookup
for kind in known_kinds():
    for spec in lookup(kind).examples():
        K = setkit.compile(spec)
        t=time.time()
        try:
            out = setkit.testing.check_derivatives(K)
            print(kind, [round(o.worst,3) for o in out], out[0].cases, round(time.time()-t,2))
        except Exception as e:
            print(kind, "FAIL", type(e).__name__, str(e)[:300])
