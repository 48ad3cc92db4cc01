namespace FedGrid.Learning.Networks;

/// <summary>Element-wise activation of a hidden layer.</summary>
public enum Activation
{
    /// <summary>Hyperbolic tangent; derivative 1 − tanh².</summary>
    Tanh,

    /// <summary>Rectified linear unit max(0, z); derivative 1 for z &gt; 0, else 0.</summary>
    Relu,
}
