# Independent reference for TestDetectRollingBaselineJump (rules as in internal/alert/doc.go).
# Run: python3 internal/alert/testdata/rolling_reference.py
from fractions import Fraction as F
import math
lam=F(1,5); L=3; minS=100; base=12; closeAfter=3
iv=[(400,40)]*24+[(400,64)]*6+[(400,40)]*20
alerting=[False]*len(iv)
z=None; zs=[]
opened=None; closed=None; quiet=0; last=None
for i,(n,a) in enumerate(iv):
    pool=[j for j in range(max(0,i-base),i) if iv[j][0]>=minS and not alerting[j]]
    N=sum(iv[j][0] for j in pool); A=sum(iv[j][1] for j in pool)
    if N==0 or n<minS:
        continue
    p0=F(A,N)
    p0=min(max(p0,F(1,2*N)),1-F(1,2*N))
    if z is None: z=p0
    z=lam*F(a,n)+(1-lam)*z
    # variance by the explicit sum over evaluated intervals j<=i
    ev=[j for j in range(i+1) if j>=1]  # interval 0 has no history; all others evaluated
    k=len(ev)
    var=sum(lam**2*(1-lam)**(2*(k-1-m))*p0*(1-p0)/iv[j][0] for m,j in enumerate(ev))
    ucl=float(p0)+L*math.sqrt(var)
    alerting[i]= float(z)>ucl
    if 22<=i<=40: print(i, float(p0), p0, float(z), ucl, alerting[i])
    if alerting[i]:
        if opened is None: opened=i
        quiet=0; last=i
    elif opened is not None and closed is None:
        quiet+=1
        if quiet>=closeAfter: closed=last+1; print("closed decision at",i)
print("opened",opened,"closed(end of last alerting)=start of",closed)
