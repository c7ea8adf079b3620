using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Support;

/// <summary>One hostile or damaged model and how it must be refused.</summary>
/// <param name="Name">What is wrong with it, as the bad-input table prints it.</param>
/// <param name="Code">The engine's error code (the service's problem type).</param>
/// <param name="DetailPart">Text the message must contain: the node, tensor or field at fault.</param>
/// <param name="RuntimeOnly">True when only building it in ONNX Runtime finds the fault (the engine's own load accepts it).</param>
internal sealed record HostileModel(string Name, byte[] Bytes, string Code, string DetailPart, bool RuntimeOnly = false)
{
    public override string ToString() => Name;
}

/// <summary>
/// Models built in code that break one rule each of the ONNX IR spec (onnx.ai, "IR" and onnx.proto): cycles,
/// shapes and data that disagree, unknown operators and types, external data, missing parts. Shared by the
/// engine's refusal tests, the service's bad-input corpus and the fuzz harness's seed corpus.
/// </summary>
internal static class HostileModels
{
    private static readonly float[] W = GraphBuilder.RandomValues(91, 12);

    public static IReadOnlyList<HostileModel> All { get; } = Build();

    /// <summary>x [2,4] -> MatMul(w [4,3]) -> y [2,3]: the valid model most cases damage one part of.</summary>
    public static GraphBuilder MatMul(P.TensorProto? weight = null) => new GraphBuilder()
        .Input("x", 2, 4).Initializer(weight ?? GraphBuilder.FloatTensor("w", [4, 3], W))
        .Node("MatMul", ["x", "w"], ["y"], "fc")
        .Output("y", 2, 3);

    private static List<HostileModel> Build()
    {
        var models = new List<HostileModel>
        {
            // Cycles (ONNX IR: a graph is a DAG). The first is the 143-byte model that made the normaliser loop forever.
            new("two Identity nodes feeding each other, read by a MatMul", new GraphBuilder()
                .Input("x", 2, 4)
                .Node("Identity", ["b"], ["a"], "ia").Node("Identity", ["a"], ["b"], "ib")
                .Node("MatMul", ["x", "a"], ["y"], "fc").Output("y", 2, 3).ToBytes(), "model-invalid", "cycle"),
            new("an Identity that reads its own output", new GraphBuilder()
                .Input("x", 2, 4).Node("Identity", ["a"], ["a"], "self")
                .Node("MatMul", ["x", "a"], ["y"], "fc").Output("y", 2, 3).ToBytes(), "model-invalid", "'self'"),
            new("a Cast and an Identity in a loop behind a Gemm weight", new GraphBuilder()
                .Input("x", 2, 4)
                .Node("Cast", ["b"], ["a"], "to_float", GraphBuilder.IntAttribute("to", 1)).Node("Identity", ["a"], ["b"], "back")
                .Node("Gemm", ["x", "a"], ["y"], "fc").Output("y", 2, 3).ToBytes(), "model-invalid", "cycle"),
            new("activations in a loop (Add feeds Relu feeds Add)", MatMul()
                .Node("Add", ["y", "r"], ["s"], "add").Node("Relu", ["s"], ["r"], "relu").Output("s", 2, 3).ToBytes(), "model-invalid", "cycle"),
            new("a cycle inside an If branch", IfModel(new GraphBuilder()
                .Node("Identity", ["q"], ["p"], "inner_p").Node("Identity", ["p"], ["q"], "inner_q")
                .Node("MatMul", ["x", "p"], ["then_out"], "inner_fc").Output("then_out", 2, 3).BuildGraph()), "model-invalid", "cycle"),
            new("one value assigned by two nodes", MatMul()
                .Node("Relu", ["x"], ["y"], "second_writer").ToBytes(), "model-invalid", "'second_writer'"),

            // Shapes and data that disagree (onnx.proto, TensorProto: dims, raw_data and the typed fields).
            new("dims [2^31, 2^31] with 16 bytes", MatMul(Raw("w", [1L << 31, 1L << 31], 1, 16)).ToBytes(), "model-invalid", "initializer 'w'"),
            new("dims [2^32, 2^32] that wrap to 0 elements", MatMul(Raw("w", [1L << 32, 1L << 32], 1, 0)).ToBytes(), "model-invalid", "initializer 'w'"),
            new("dims [2^62, 4] that wrap to 0 bytes", MatMul(Raw("w", [1L << 62, 4], 1, 0)).ToBytes(), "model-invalid", "initializer 'w'"),
            new("a negative dimension", MatMul(Raw("w", [-4, 3], 1, 48)).ToBytes(), "model-invalid", "negative dimension (-4)"),
            new("two negative dimensions whose product is positive", MatMul(Raw("w", [-4, -3], 1, 48)).ToBytes(), "model-invalid", "negative dimension"),
            new("FLOAT raw data 4 bytes short", MatMul(Raw("w", [4, 3], 1, 44)).ToBytes(), "model-invalid", "holds 44 bytes"),
            new("FLOAT raw data 4 bytes long", MatMul(Raw("w", [4, 3], 1, 52)).ToBytes(), "model-invalid", "holds 52 bytes"),
            new("FLOAT float_data with 11 of 12 values", MatMul(Typed("w", [4, 3], 1, t => t.FloatData.Add(W[..11]))).ToBytes(), "model-invalid", "float_data"),
            new("FLOAT with no data at all", MatMul(Typed("w", [4, 3], 1, _ => { })).ToBytes(), "model-invalid", "initializer 'w'"),
            new("BFLOAT16 raw data of 2 values for 12", BFloatMatMul(Raw("w16", [4, 3], 16, 4)), "model-invalid", "initializer 'w16'"),
            new("BFLOAT16 int32_data of 3 values for 12", BFloatMatMul(Typed("w16", [4, 3], 16, t => t.Int32Data.Add([1, 2, 3]))), "model-invalid", "int32_data"),
            new("FLOAT16 raw data of odd length", HalfMatMul(Raw("w16", [4, 3], 10, 23)), "model-invalid", "holds 23 bytes"),
            new("DOUBLE double_data with 13 of 12 values", MatMul(Typed("w", [4, 3], 11, t => t.DoubleData.Add(new double[13]))).ToBytes(), "model-invalid", "double_data"),
            new("INT64 shape tensor with 3 int64_data values for 2", ReshapeModel(Typed("shape", [2], 7, t => t.Int64Data.Add([3, 4, 1]))), "model-invalid", "initializer 'shape'"),
            new("INT8 raw data 1 byte short", MatMul().Initializer(Raw("pad", [8], 3, 7)).ToBytes(), "model-invalid", "initializer 'pad'"),
            new("INT4 raw data where 12 values need 6 bytes", MatMul().Initializer(Raw("nibbles", [12], 22, 12)).ToBytes(), "model-invalid", "needs 6"),
            new("element type 99, which ONNX does not define", MatMul().Initializer(Raw("odd", [2], 99, 8)).ToBytes(), "model-invalid", "element type 99"),
            new("element type UNDEFINED (0)", MatMul().Initializer(Raw("undefined", [2], 0, 8)).ToBytes(), "model-invalid", "'undefined'"),
            new("STRING tensor carrying raw_data", MatMul().Initializer(Raw("words", [2], 8, 8)).ToBytes(), "model-invalid", "STRING"),
            new("two initializers named 'w'", MatMul().Initializer(GraphBuilder.FloatTensor("w", [4, 3], W)).ToBytes(), "model-invalid", "both named 'w'"),
            new("Constant node whose tensor is 8 bytes short", new GraphBuilder().Input("x", 2, 4)
                .Constant("c", Raw("c", [4, 3], 1, 40)).Node("MatMul", ["x", "c"], ["y"], "fc").Output("y", 2, 3).ToBytes(), "model-invalid", "attribute 'value'"),
            new("Constant node with a negative dimension", new GraphBuilder().Input("x", 2, 4)
                .Constant("c", Raw("c", [-1, 3], 1, 12)).Node("MatMul", ["x", "c"], ["y"], "fc").Output("y", 2, 3).ToBytes(), "model-invalid", "negative dimension"),
            new("weight inside an If branch with 5 of 16 values", IfModel(new GraphBuilder()
                .Constant("w_then", Raw("w_then", [4, 3], 1, 20)).Node("MatMul", ["x", "w_then"], ["then_out"], "inner_fc").Output("then_out", 2, 3).BuildGraph()),
                "model-invalid", "'w_then'"),
            new("sparse initializer whose values disagree with their dims", SparseModel(), "model-invalid", "sparse initializer"),
            new("sparse initializer without values (found by the fuzz run)", SparseWithoutValues(), "model-invalid", "has no values"),

            // External data: an upload must be one self-contained file (paths are refused, never followed).
            new("external data pointing at /etc/passwd", ExternalModel("/etc/passwd"), "model-external-data", "'w'"),
            new("external data climbing out with ../../", ExternalModel("../../secrets.bin"), "model-external-data", "external file"),

            // Structure.
            new("an empty graph (no nodes)", new GraphBuilder().Input("x", 2, 4).ToBytes(), "model-no-layers", "no quantizable layer"),
            new("no graph at all", new P.ModelProto { IrVersion = 8, OpsetImport = { new P.OperatorSetIdProto { Version = 13 } } }.ToByteArray(), "model-not-onnx", "no graph"),
            new("IR version 0", MatMul().IrVersion(0).ToBytes(), "model-not-onnx", "IR version"),
            new("only a custom-domain opset", CustomOpsetOnly(), "model-invalid", "standard ONNX operator set"),
            new("a node reading a value nothing defines", MatMul().Node("Add", ["y", "ghost"], ["z"], "add").Output("z", 2, 3).ToBytes(), "model-invalid", "'ghost'"),
            new("a graph output nothing produces", MatMul().Output("phantom", 2, 3).ToBytes(), "model-invalid", "'phantom'"),
            new("a weight stored as INT8 (already quantized)", MatMulCastFrom(Raw("w8", [4, 3], 3, 12)), "model-already-quantized", "'w8'"),
            new("a QuantizeLinear node (already quantized)", MatMul().Initializer(GraphBuilder.FloatTensor("s", [], [0.1f]))
                .Node("QuantizeLinear", ["y", "s"], ["yq"], "q_out").ToBytes(), "model-already-quantized", "'q_out'"),
            new("weights cast to FLOAT from INT32", MatMulCastFrom(Raw("w32", [4, 3], 6, 48)), "model-non-float-weights", "INT32"),
            new("If nested 150 deep (past the protobuf recursion limit)", DeeplyNested(150), "model-not-onnx", "not a readable ONNX model"),

            // Only ONNX Runtime finds these: the engine's own checks pass.
            new("an operator ONNX does not define", MatMul().Node("Frobnicate", ["y"], ["z"], "mystery").Output("z", 2, 3).ToBytes(),
                "model-unsupported-operator", "'mystery'", RuntimeOnly: true),
            new("an operator from a domain the model never imports", MatMulWithDomainNode(), "model-unsupported-operator", "com.example", RuntimeOnly: true),
            new("MatMul whose weight [5,3] cannot multiply input [2,4]", new GraphBuilder().Input("x", 2, 4)
                .Initializer("w", [5, 3], GraphBuilder.RandomValues(3, 15)).Node("MatMul", ["x", "w"], ["y"], "fc").Output("y", 2, 3).ToBytes(),
                "model-invalid", "'fc'", RuntimeOnly: true),
            new("Conv whose weight has rank 1", new GraphBuilder().Input("x", 1, 1, 4, 4)
                .Initializer("k", [3], [1f, 2f, 3f]).Node("Conv", ["x", "k"], ["y"], "conv").Output("y", 1, 1, 4, 4).ToBytes(),
                "model-invalid", "'conv'", RuntimeOnly: true),
            new("a 100000-entry attribute MatMul does not have", HugeAttribute(), "model-invalid", "'fc'", RuntimeOnly: true),
            new("opset 9999, which no runtime knows", MatMul().Opset(9999).ToBytes(), "model-invalid", "9999", RuntimeOnly: true),
            new("Relu fed an INT64 weight", new GraphBuilder().Input("x", 2, 4).Initializer("w", [4, 3], W).Initializer(Typed("k", [2], 7, t => t.Int64Data.Add([1, 2])))
                .Node("MatMul", ["x", "w"], ["y"], "fc").Node("Softmax", ["k"], ["z"], "soft").Output("y", 2, 3).Output("z", 2).ToBytes(),
                "model-invalid", "'soft'", RuntimeOnly: true),
        };
        return models;
    }

    private static P.TensorProto Raw(string name, long[] dims, int dataType, int bytes)
    {
        var tensor = new P.TensorProto { Name = name, DataType = dataType, RawData = ByteString.CopyFrom(new byte[bytes]) };
        tensor.Dims.AddRange(dims);
        return tensor;
    }

    private static P.TensorProto Typed(string name, long[] dims, int dataType, Action<P.TensorProto> fill)
    {
        var tensor = new P.TensorProto { Name = name, DataType = dataType };
        tensor.Dims.AddRange(dims);
        fill(tensor);
        return tensor;
    }

    private static byte[] BFloatMatMul(P.TensorProto weight) => MatMulCastFrom(weight);

    private static byte[] HalfMatMul(P.TensorProto weight) => MatMulCastFrom(weight);

    /// <summary>x -> MatMul(Cast(weight) to FLOAT), the layout FP16 exporters use.</summary>
    private static byte[] MatMulCastFrom(P.TensorProto weight) => new GraphBuilder()
        .Input("x", 2, 4).Initializer(weight)
        .Node("Cast", [weight.Name], ["w"], "widen", GraphBuilder.IntAttribute("to", 1))
        .Node("MatMul", ["x", "w"], ["y"], "fc").Output("y", 2, 3).ToBytes();

    private static byte[] ReshapeModel(P.TensorProto shape) => MatMul().Initializer(shape)
        .Node("Reshape", ["y", "shape"], ["z"], "reshape").Output("z", 3, 2).ToBytes();

    private static byte[] IfModel(P.GraphProto thenBranch)
    {
        var elseBranch = new GraphBuilder().Node("MatMul", ["x", "w"], ["else_out"], "else_fc").Output("else_out", 2, 3).BuildGraph();
        return new GraphBuilder()
            .Input("x", 2, 4).Input("cond", P.TensorProto.Types.DataType.Bool).Initializer("w", [4, 3], W)
            .Node("If", ["cond"], ["y"], "choose", GraphBuilder.GraphAttribute("then_branch", thenBranch), GraphBuilder.GraphAttribute("else_branch", elseBranch))
            .Output("y", 2, 3).ToBytes();
    }

    private static byte[] SparseModel()
    {
        var model = MatMul().Build();
        var values = Raw("sparse_values", [3], 1, 8);
        var indices = Typed("sparse_indices", [3], 7, t => t.Int64Data.Add([0, 1, 2]));
        var sparse = new P.SparseTensorProto { Values = values, Indices = indices };
        sparse.Dims.AddRange([4, 3]);
        model.Graph.SparseInitializer.Add(sparse);
        return model.ToByteArray();
    }

    private static byte[] SparseWithoutValues()
    {
        var model = MatMul().Build();
        var sparse = new P.SparseTensorProto { Indices = Typed("sparse_indices", [1], 7, t => t.Int64Data.Add(0)) };
        sparse.Dims.Add(4);
        model.Graph.SparseInitializer.Add(sparse);
        return model.ToByteArray();
    }

    private static byte[] ExternalModel(string location)
    {
        var model = MatMul().Build();
        var weight = model.Graph.Initializer[0];
        weight.RawData = ByteString.Empty;
        weight.DataLocation = P.TensorProto.Types.DataLocation.External;
        weight.ExternalData.Add(new P.StringStringEntryProto { Key = "location", Value = location });
        weight.ExternalData.Add(new P.StringStringEntryProto { Key = "length", Value = "48" });
        return model.ToByteArray();
    }

    private static byte[] CustomOpsetOnly()
    {
        var model = MatMul().Build();
        model.OpsetImport.Clear();
        model.OpsetImport.Add(new P.OperatorSetIdProto { Domain = "com.example", Version = 1 });
        return model.ToByteArray();
    }

    private static byte[] MatMulWithDomainNode()
    {
        var model = MatMul().Build();
        model.Graph.Node.Add(new P.NodeProto { Name = "foreign", OpType = "Scale", Domain = "com.example", Input = { "y" }, Output = { "z" } });
        model.Graph.Output[0] = model.Graph.Output[0].Clone();
        model.Graph.Output[0].Name = "z";
        return model.ToByteArray();
    }

    private static byte[] HugeAttribute()
    {
        var model = MatMul().Build();
        var attribute = new P.AttributeProto { Name = "padding_of_doom", Type = P.AttributeProto.Types.AttributeType.Ints };
        attribute.Ints.Add(Enumerable.Range(0, 100_000).Select(i => (long)i));
        model.Graph.Node[0].Attribute.Add(attribute);
        return model.ToByteArray();
    }

    /// <summary>If inside If, <paramref name="depth"/> deep: Google.Protobuf stops parsing at its recursion limit of 100 (CodedInputStream.DefaultRecursionLimit).</summary>
    private static byte[] DeeplyNested(int depth)
    {
        var inner = new GraphBuilder().Node("MatMul", ["x", "w"], ["out"], "deep_fc").Output("out", 2, 3).BuildGraph();
        for (var i = 0; i < depth; i++)
        {
            inner = new GraphBuilder()
                .Node("If", ["cond"], ["out"], $"if_{i}", GraphBuilder.GraphAttribute("then_branch", inner), GraphBuilder.GraphAttribute("else_branch", inner.Clone()))
                .Output("out", 2, 3).BuildGraph();
            if (i > 8)
            {
                // Both branches nested would double the size at each level; past ten levels keep one.
                inner.Node[0].Attribute.RemoveAt(1);
            }
        }

        var model = new GraphBuilder().Input("x", 2, 4).Input("cond", P.TensorProto.Types.DataType.Bool).Initializer("w", [4, 3], W).Build();
        model.Graph.Node.AddRange(inner.Node);
        model.Graph.Output.AddRange(inner.Output);
        return model.ToByteArray();
    }
}
