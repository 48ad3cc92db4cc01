using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;
using FedGrid.Learning.Networks;

namespace FedGrid.Federation.Protocol;

/// <summary>Converts network shapes to and from their wire form (<see cref="NetworkShapeSpec"/>).</summary>
public static class ShapeCodec
{
    /// <summary>The wire form of a shape.</summary>
    /// <param name="shape">The shape.</param>
    /// <returns>The message.</returns>
    public static NetworkShapeSpec ToSpec(NetworkShape shape)
    {
        ArgumentNullException.ThrowIfNull(shape);
        var spec = new NetworkShapeSpec
        {
            OutputSize = shape.OutputSize,
            HiddenActivation = shape.HiddenActivation == Activation.Tanh ? "tanh" : "relu",
        };
        spec.InputBlocks.AddRange(shape.InputBlocks);
        spec.HiddenSizes.AddRange(shape.HiddenSizes);
        return spec;
    }

    /// <summary>The shape a wire form describes.</summary>
    /// <param name="spec">The message.</param>
    /// <returns>The shape.</returns>
    /// <exception cref="ProtocolException">Missing or invalid shape.</exception>
    public static NetworkShape FromSpec(NetworkShapeSpec? spec)
    {
        if (spec is null)
        {
            throw new ProtocolException("network shape missing");
        }
        Activation activation = spec.HiddenActivation switch
        {
            "tanh" => Activation.Tanh,
            "relu" => Activation.Relu,
            _ => throw new ProtocolException($"unknown hidden activation '{spec.HiddenActivation}'"),
        };
        try
        {
            return new NetworkShape([.. spec.InputBlocks], [.. spec.HiddenSizes], spec.OutputSize, activation);
        }
        catch (ArgumentException e)
        {
            throw new ProtocolException($"invalid network shape: {e.Message}");
        }
    }
}
