#!/usr/bin/python3
"""Checks the generated files: every ONNX file passes onnx.checker, prints its
opset and op types, BatchNormalization is unfused where promised, and for the
pure Gemm/Relu/Sigmoid models a float64 NumPy evaluation of the ONNX graph
reproduces the golden layer statistics (this checks the module -> node mapping
by value). Run: /usr/bin/python3 testdata/gen/verify.py
"""
import onnx, onnx.checker, onnx.numpy_helper as nh, numpy as np, json, glob, os
os.chdir(os.path.join(os.path.dirname(os.path.abspath(__file__)), '..'))
for f in sorted(glob.glob('ref/*.onnx'))+sorted(glob.glob('demo/*.onnx')):
    m=onnx.load(f); onnx.checker.check_model(m)
    ops=sorted({n.op_type for n in m.graph.node}); op=[o.version for o in m.opset_import if o.domain in('','ai.onnx')][0]
    bn=sum(n.op_type=='BatchNormalization' for n in m.graph.node)
    if any(k in f for k in ('vgg_bn','cnn_bn','resnet','mobile','densenet','tcn1d')): assert bn>0, f
    print(f"{f:34s} {os.path.getsize(f):7d}B opset {op} BN {bn} inputs {[(i.name,i.type.tensor_type.elem_type) for i in m.graph.input]} ops {' '.join(ops)}")
# numeric check of mapping for pure Gemm/Relu/Sigmoid graphs
def run(m,x):
    env={i.name:nh.to_array(i).astype(np.float64) for i in m.graph.initializer}; env['input']=x.astype(np.float64)
    for n in m.graph.node:
        a=[env[i] for i in n.input]
        if n.op_type=='Gemm':
            tb={at.name:at.i for at in n.attribute}.get('transB',0)
            env[n.output[0]]=a[0]@(a[1].T if tb else a[1])+a[2]
        elif n.op_type=='Relu': env[n.output[0]]=np.maximum(a[0],0)
        elif n.op_type=='Sigmoid': env[n.output[0]]=1/(1+np.exp(-a[0]))
        else: return None
    return env
for name,inp in [('ref/mlp_healthy','ref/digits_sample.npy'),('ref/mlp_dead','ref/digits_sample.npy'),('ref/sigmoid_saturated','ref/digits_sample_raw.npy'),('ref/zero_init','ref/digits_sample.npy'),('demo/spindle-overdriven','demo/readings.npy')]:
    m=onnx.load(name+'.onnx'); env=run(m,np.load(inp))
    g=json.load(open(name+'.golden.json')) if os.path.exists(name+'.golden.json') else None
    if g is None:
        g={'layers':json.load(open('demo/expected.json'))['models']['spindle-overdriven.onnx']['layers']}
        for l in g['layers']: l['onnx_output']=[n.output[0] for n in m.graph.node if n.name==l['onnx_node']][0]
    worst=0
    for l in g['layers']:
        y=env[l['onnx_output']]; worst=max(worst,abs(y.mean()-l['mean'])/(abs(l['mean'])+1e-6),abs(y.std()-l['std'])/l['std'])
        assert worst<1e-5,(name,l['module'],worst)
        if l.get('dead_fraction') is not None:
            ax=-1; d=1-(y>0).any(0).mean(); assert abs(d-l['dead_fraction'])<1e-9,(name,l['module'],d,l['dead_fraction'])
    out=np.load(name+'.output.npy') if os.path.exists(name+'.output.npy') else None
    print(name,'max rel dev of mean/std vs numpy-eval', worst, 'output maxabs', None if out is None else np.abs(env['output']-out).max())
